"""Families in parallel (orbtool.batch): cases read and analysed inside the
workers, summaries in the parent, a broken case a row with its reason.

External references: dask.distributed (a LocalCluster of 2 worker processes
must give the same table as the batch in this process) and the operating
system's process ids (the reading happens in other processes). The case data
are the bundled demo family (MODEL DATA).
"""

from __future__ import annotations

import gzip
import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from orbtool.batch import analyze_family, full_case
from orbtool.io import load_family
from orbtool.pipeline import demo_manifest

DEMO = demo_manifest().parent
ZB = [("SnS-zincblende_V_S_q0", "defects/SnS-zincblende/V_S/q0", 0),
      ("SnS-zincblende_V_S_q+2", "defects/SnS-zincblende/V_S/q+2", 2),
      ("SnS-zincblende_V_Sn_q0", "defects/SnS-zincblende/V_Sn/q0", 0)]


def _manifest(folder: Path, cases, host=DEMO / "hosts/SnS-zincblende") -> Path:
    lines = ['[family]', 'name = "zb"', "", "[[host]]", 'name = "zb"',
             f'path = "{os.path.relpath(host, folder)}"', ""]
    for name, path, q in cases:
        p = path if Path(path).is_absolute() else DEMO / path
        lines += ["[[case]]", f'name = "{name}"', f'path = "{os.path.relpath(p, folder)}"', 'host = "zb"',
                  f"charge = {q}", 'motif = "zincblende"', 'cation = "Sn"', ""]
    m = folder / "family.toml"
    m.write_text("\n".join(lines))
    return m


@pytest.fixture(scope="module")
def manifest(tmp_path_factory):
    return _manifest(tmp_path_factory.mktemp("fam"), ZB)


@pytest.fixture(scope="module")
def in_parent(manifest):
    return analyze_family(load_family(manifest), workers=1, progress=False)


@pytest.fixture(scope="module")
def in_workers(manifest):
    return analyze_family(manifest, workers=2, progress=False)


def test_manifest_route_equals_reading_in_the_parent(in_parent, in_workers):
    assert not in_workers.errors
    assert in_workers.table() == in_parent.table()


def test_cases_are_read_in_other_processes_and_parent_keeps_no_arrays(in_workers):
    pids = {st["pid"] for st in in_workers.batch["cases"].values()}
    assert os.getpid() not in pids
    for c in in_workers.family:
        assert c.defect_pdos is None and c.projections is None and "state" not in c.grids
        assert c.defect is not None and c.total_energy is not None  # what the family steps need stays
    hosts = {id(c.host_pdos) for c in in_workers.family}
    assert len(hosts) == 1 and in_workers.family[0].host_pdos is not None  # host arrays once per host
    for st in in_workers.batch["cases"].values():
        assert st["cpu"] > 0 and st["wall"] > 0


def test_full_case_rereads_the_arrays(in_workers):
    full = full_case(in_workers.family, ZB[0][0])
    assert full.defect_pdos is not None and full.projections is not None and "state" in full.grids


def test_family_steps_work_on_summaries(in_parent, in_workers):
    from orbtool.family import FamilyAnalysis
    a, b = (FamilyAnalysis(r.family, list(r.results)) for r in (in_parent, in_workers))  # fixtures untouched
    a.transition_levels()
    b.transition_levels()
    assert b.levels and b.table() == a.table()


def test_half_written_procar_is_one_row_not_an_aborted_family(tmp_path):
    broken = tmp_path / "broken"
    shutil.copytree(DEMO / ZB[0][1], broken)
    text = gzip.open(broken / "PROCAR.gz", "rt").read()
    (broken / "PROCAR.gz").unlink()
    (broken / "PROCAR").write_text(text[: len(text) * 3 // 5])  # a run still writing its PROCAR
    cases = [("broken", str(broken), 0)] + ZB[1:]
    res = analyze_family(_manifest(tmp_path, cases), workers=2, progress=False)
    assert set(res.errors) == {"broken"}
    assert "PROCAR" in res.errors["broken"]
    assert [r.name for r in res.results] == ["broken"] + [c[0] for c in ZB[1:]]
    assert all(r.ok for r in res.results[1:])
    row = res.table()[0]
    assert row["status"] == "error" and "PROCAR" in row["error"]


def test_unreachable_scheduler_is_a_clear_error():
    pytest.importorskip("dask.distributed")
    from orbtool.batch import CONNECT_TIMEOUT
    from orbtool.errors import OrbtoolError
    assert CONNECT_TIMEOUT <= 30
    with pytest.raises(OrbtoolError, match="no dask scheduler answered"):
        analyze_family(demo_manifest(), client="tcp://127.0.0.1:9", progress=False)


_SCRIPT = textwrap.dedent('''
    import json, os, sys
    from dask.distributed import Client, LocalCluster
    from orbtool.batch import analyze_family
    if __name__ == "__main__":
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cl, \\
                Client(cl) as client:
            res = analyze_family(sys.argv[1], client=client, progress=False)
        print(json.dumps({"parent": os.getpid(), "pids": sorted({s["pid"] for s in res.batch["cases"].values()}),
                          "readers": sorted(m for m in sys.modules if m in ("orbtool.io.procar", "orbtool.io.doscar",
                                                                           "orbtool.io.chgcar")),
                          "table": res.table(), "errors": res.errors}, default=str))
''')


@pytest.mark.slow
def test_dask_localcluster_of_two_workers_reads_in_the_workers(manifest, in_parent, tmp_path):
    pytest.importorskip("dask.distributed")
    script = tmp_path / "run.py"
    script.write_text(_SCRIPT)
    out = subprocess.run([sys.executable, str(script), str(manifest)], capture_output=True, text=True,
                         timeout=600, env={**os.environ})
    assert out.returncode == 0, out.stderr[-3000:]
    doc = json.loads(out.stdout.strip().splitlines()[-1])
    assert not doc["errors"]
    assert doc["parent"] not in doc["pids"] and len(doc["pids"]) >= 1
    assert doc["readers"] == []  # the parent never imported a PROCAR/DOSCAR/CHGCAR reader
    assert doc["table"] == json.loads(json.dumps(in_parent.table(), default=str))


def test_manifest_reading_choices_reach_the_workers(tmp_path):
    """docs/manifest.md: ``units`` and a host's true ``edges`` apply to every case of the manifest; the
    batch runner (cases read in workers) and load_family (read in the parent) make the same choices."""
    from orbtool.batch import _load, plan_family
    m = _manifest(tmp_path, ZB[:1])
    text = m.read_text().replace('name = "zb"\n', 'name = "zb"\nunits = "bohr"\n', 1)
    m.write_text(text.replace('[[host]]\nname = "zb"\n', '[[host]]\nname = "zb"\nedges = 1.7\n'))
    specs, _ = plan_family(m)
    assert (specs[0].units, specs[0].host_units, specs[0].edges) == ("bohr", "bohr", 1.7)
    in_parent, in_worker = load_family(m, grids=False)[ZB[0][0]], _load(specs[0])
    truth = in_parent.host_projections.meta.get("true_band_edges")
    assert truth is not None
    assert in_worker.host_projections.meta.get("true_band_edges") == truth
