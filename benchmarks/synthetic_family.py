"""A synthetic family for benchmarks: copies of the bundled demo cases (MODEL DATA) with perturbed geometry.

``python benchmarks/synthetic_family.py OUT N`` writes ``OUT/family.toml`` with ``N`` cases. Case ``i`` is
demo case ``i mod 14`` whose defect POSCAR has every atom displaced by a random vector (Gaussian,
``amplitude`` Å per component, default 0.02 Å; seeded); its DOSCAR, PROCAR, PARCHG and OSZICAR are
symbolic links to the demo files (the benchmark measures reading and analysis, not physics), and the
hosts are links to the demo hosts. Labels follow the demo case, with ``variant = "synthetic"``.
"""

from __future__ import annotations

import os
import sys
import tomllib
from pathlib import Path

import numpy as np

from orbtool.pipeline import demo_manifest


def make_family(out, n: int, *, amplitude: float = 0.02, seed: int = 0) -> Path:
    """Write a synthetic family of ``n`` cases under ``out``; returns the manifest path."""
    from ase.io import read, write

    out = Path(out)
    demo = demo_manifest()
    data = tomllib.loads(demo.read_text())
    rng = np.random.default_rng(seed)
    (out / "hosts").mkdir(parents=True, exist_ok=True)
    lines = ["# MODEL DATA: synthetic benchmark family (perturbed copies of the demo cases)", "[family]",
             f'name = "synthetic {n}"', "", "[references]"]
    for k, v in data.get("references", {}).items():
        if k == "mu":
            lines.append("mu = { " + ", ".join(f"{e} = {x!r}" for e, x in v.items()) + " }")
    lines.append("")
    for h in data["host"]:
        link = out / "hosts" / h["name"]
        if not link.exists():
            link.symlink_to((demo.parent / h["path"]).resolve(), target_is_directory=True)
        lines += ["[[host]]", f'name = "{h["name"]}"', f'path = "hosts/{h["name"]}"', ""]
    cases = data["case"]
    for i in range(n):
        c = cases[i % len(cases)]
        src = demo.parent / c["path"]
        dst = out / "cases" / f"c{i:05d}"
        dst.mkdir(parents=True, exist_ok=True)
        for f in src.iterdir():
            if f.name != "POSCAR" and not (dst / f.name).exists():
                (dst / f.name).symlink_to(f.resolve())
        atoms = read(src / "POSCAR", format="vasp")
        atoms.positions += rng.normal(0.0, amplitude, atoms.positions.shape)
        write(dst / "POSCAR", atoms, format="vasp", direct=True)
        lines += ["[[case]]", f'name = "{c["name"]}_s{i:05d}"', f'path = "cases/c{i:05d}"', f'host = "{c["host"]}"',
                  f"charge = {c.get('charge', 0)}"]
        for k in ("motif", "cation", "anion", "vacancy"):
            if k in c:
                lines.append(f'{k} = "{c[k]}"')
        lines += [f'defect = "{c.get("defect", c["name"])}_s{i:05d}"', 'variant = "synthetic"', ""]
    m = out / "family.toml"
    m.write_text("\n".join(lines))
    return m


if __name__ == "__main__":
    print(make_family(sys.argv[1], int(sys.argv[2])), file=sys.stdout)
    os._exit(0)
