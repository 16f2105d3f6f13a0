"""The layering rules of ARCHITECTURE.md, checked in a fresh interpreter:
``import orbtool`` pulls in no heavy library, and the numerical layers
(io, analysis, tb, levels, family) never import plotting or widget libraries."""

import subprocess
import sys

HEAVY = ("bokeh", "ipywidgets", "nglview", "matplotlib", "jupyter_bokeh")


def _loaded(code: str) -> set[str]:
    prog = code + "\nimport sys\nprint(' '.join(sorted(m for m in sys.modules)))"
    out = subprocess.run([sys.executable, "-c", prog], capture_output=True, text=True, check=True).stdout
    return set(out.split())


def test_import_orbtool_is_light():
    mods = _loaded("import orbtool")
    assert not [m for m in HEAVY + ("scipy", "ase") if m in mods]


def test_numerics_never_import_plotting_or_widgets():
    code = "\n".join([
        "import pkgutil, importlib, orbtool",
        "for pkg in ('io', 'analysis', 'tb', 'levels'):",
        "    p = importlib.import_module('orbtool.' + pkg)",
        "    for m in pkgutil.iter_modules(p.__path__):",
        "        importlib.import_module(f'orbtool.{pkg}.{m.name}')",
        "import orbtool.family, orbtool.mechanism, orbtool.session, orbtool.pipeline",
    ])
    mods = _loaded(code)
    assert not [m for m in HEAVY if m in mods]
