"""Paths and helpers for the external-engine fixtures (``tests/external/data``)."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
#: the rocksalt-cluster defect variants, each paired with the ``host`` run
DEFECTS = ("vac", "vac_out5", "vac_in5", "vac_na")
#: the Si-vacancy variants, paired with ``si_host``
SI_DEFECTS = ("si_vac", "si_vac_out5", "si_vac_in5")


def host_of(case: str) -> str:
    """Name of the host run a defect case is compared with."""
    return "si_host" if case.startswith("si_") else "host"


def engine_record(case: str, root: Path = DATA) -> dict:
    """The engine's own numbers for one case (``engine.json`` written by generate.py)."""
    return json.loads((Path(root) / case / "engine.json").read_text())


def load_generator():
    """generate.py as a module (loaded by path: the name ``generate`` is too common to import)."""
    spec = importlib.util.spec_from_file_location("orbtool_external_generate", HERE / "generate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod
