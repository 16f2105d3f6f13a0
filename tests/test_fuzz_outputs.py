"""Nothing of the user's is lost (issue 18): output folders, figures, sessions, the CLI's own files.

Killed runs are real processes killed with SIGKILL; concurrent runs are real second processes. The
rules checked are orbtool's documented contract (orbtool/outputs.py, orbtool/session.py); atomic
replacement is POSIX rename(2) semantics ("If newpath already exists, it will be atomically replaced").
"""

from __future__ import annotations

import csv
import io
import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import orbtool
from orbtool.errors import OrbtoolError, SessionError
from orbtool.outputs import LOCK, MARKER, TMP_SUFFIX, OutputFolder

ROOT = Path(__file__).resolve().parents[1]
posix = pytest.mark.skipif(os.name != "posix", reason="POSIX processes and permissions")


def _env():
    return {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}


def _spawn(code: str) -> subprocess.Popen:
    """A Python child that prints 'ready' when it reached the interesting point."""
    p = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                         text=True, env=_env())
    line = p.stdout.readline()
    assert line.strip() == "ready", (line, p.stderr.read() if p.poll() is not None else "")
    return p


def _kill(p: subprocess.Popen):
    p.send_signal(signal.SIGKILL)
    p.wait(timeout=60)


# ------------------------------------------------------------------ the marker
def test_symlinked_marker_is_not_trusted(tmp_path):
    """A .orbtool-output that is a symbolic link is refused, and the file it points to is untouched."""
    user = tmp_path / "thesis.json"
    user.write_text('{"written_by": "orbtool", "files": ["family.json"]}')
    out = tmp_path / "out"
    out.mkdir()
    (out / MARKER).symlink_to(user)
    (out / "family.json").write_text("the user's own family.json")
    for force in (False, True):
        with pytest.raises(OrbtoolError, match="marker is a symbolic link"):
            OutputFolder(out, force=force)
    assert user.read_text() == '{"written_by": "orbtool", "files": ["family.json"]}'
    assert (out / "family.json").read_text() == "the user's own family.json"


@pytest.mark.parametrize("content", ["", "{}", '{"written_by": "someone", "files": ["family.json"]}', "not json",
                                     '{"written_by": "orbtool", "files": "family.json"}'])
def test_empty_or_foreign_marker_is_not_trusted(tmp_path, content):
    """An empty or non-orbtool marker does not make a folder orbtool's: --force is needed."""
    out = tmp_path / "out"
    out.mkdir()
    (out / MARKER).write_text(content)
    (out / "family.json").write_text("mine")
    with pytest.raises(OrbtoolError, match="--force"):
        OutputFolder(out)
    assert (out / "family.json").read_text() == "mine"


def test_marked_folder_does_not_replace_unlisted_files(tmp_path):
    """In a genuine orbtool folder, a file orbtool did not write (not in the marker) is not replaced."""
    out = tmp_path / "out"
    f = OutputFolder(out)
    f.write_text("family_table.csv", "a\n")
    f.close()
    (out / "family.json").write_text("put here by the user")
    g = OutputFolder(out)
    g.write_text("family_table.csv", "b\n")  # orbtool's own file: replaced
    with pytest.raises(OrbtoolError, match="does not list it"):
        g.write_text("family.json", "{}")
    assert (out / "family.json").read_text() == "put here by the user"
    assert (out / "family_table.csv").read_text() == "b\n"


def test_symlinked_figures_folder_is_refused(tmp_path):
    elsewhere = tmp_path / "user_pictures"
    elsewhere.mkdir()
    (elsewhere / "mechanism.pdf").write_bytes(b"%PDF the user's own")
    out = tmp_path / "out"
    f = OutputFolder(out)
    (out / "figures").symlink_to(elsewhere, target_is_directory=True)
    with pytest.raises(OrbtoolError, match="symbolic link"):
        f.path("figures/mechanism.pdf")
    assert (elsewhere / "mechanism.pdf").read_bytes() == b"%PDF the user's own"
    assert sorted(p.name for p in elsewhere.iterdir()) == ["mechanism.pdf"]


# ------------------------------------------------------------------ atomic writes and temporaries
def test_failed_figure_write_keeps_the_old_file(tmp_path):
    """A figure whose writing dies half way leaves the previous good file and no temporary file."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from orbtool.figures import save_figure
    fig = plt.figure()
    fig.add_subplot().plot([0, 1], [1, 0])
    good = save_figure(fig, tmp_path / "mechanism", formats=("pdf",))[0]
    before = good.read_bytes()
    assert before.startswith(b"%PDF") and len(before) > 500

    def dies(fh, *a, **k):
        fh.write(b"%PDF-1.4 partial")
        raise KeyboardInterrupt  # the user pressed Ctrl-C (or the process was being stopped)
    fig.savefig = dies
    with pytest.raises(KeyboardInterrupt):
        save_figure(fig, tmp_path / "mechanism", formats=("pdf",))
    plt.close(fig)
    assert good.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["mechanism.pdf"]


def test_leftover_temporaries_cleaned_on_start(tmp_path):
    out = tmp_path / "out"
    OutputFolder(out).write_text("report.html", "<html></html>")
    (out / "figures").mkdir()
    left = [out / f".report.html.x1y2{TMP_SUFFIX}", out / "figures" / f".mechanism.pdf.abcd{TMP_SUFFIX}"]
    for p in left:
        p.write_bytes(b"half")
    (out / "figures" / "notes.tmp").write_text("not orbtool's")
    OutputFolder(out)
    assert not any(p.exists() for p in left)
    assert (out / "figures" / "notes.tmp").exists() and (out / "report.html").exists()


# ------------------------------------------------------------------ concurrent runs
@posix
def test_second_run_into_the_same_folder_fails_clearly(tmp_path):
    out = tmp_path / "out"
    child = _spawn(f"from orbtool.outputs import OutputFolder; import time; f = OutputFolder({str(out)!r}); "
                   "f.write_text('family.json', '{}'); print('ready', flush=True); time.sleep(120)")
    try:
        r = subprocess.run([sys.executable, "-c", f"from orbtool.outputs import OutputFolder; "
                            f"OutputFolder({str(out)!r}).write_text('family.json', '[]')"],
                           capture_output=True, text=True, env=_env(), timeout=120)
        assert r.returncode != 0
        assert f"another orbtool run (pid {child.pid})" in r.stderr
        assert (out / "family.json").read_text() == "{}"
    finally:
        _kill(child)
    # the killed run left its lock file behind; the lock itself died with the process
    assert (out / LOCK).exists()
    f = OutputFolder(out)
    f.write_text("family.json", "[]")
    assert (out / "family.json").read_text() == "[]"


@posix
def test_cli_second_analyze_fails(tmp_path, capsys):
    """Through the command line: `orbtool analyze` into a folder another run holds exits 1 (the
    manifest, valid, is checked first; the lock is met before any case is read)."""
    from orbtool.pipeline import demo_manifest
    out = tmp_path / "out"
    child = _spawn(f"from orbtool.outputs import OutputFolder; import time; f = OutputFolder({str(out)!r}); "
                   "print('ready', flush=True); time.sleep(120)")
    try:
        from orbtool.cli import main
        assert main(["analyze", str(demo_manifest()), "--out", str(out), "--quiet"]) == 1
        assert "another orbtool run" in capsys.readouterr().err
    finally:
        _kill(child)


# ------------------------------------------------------------------ sessions
def test_session_self_reference_and_depth_refused(tmp_path):
    loop: dict = {"a": 1}
    loop["me"] = loop
    with pytest.raises(SessionError, match="contains itself"):
        orbtool.save_session(tmp_path / "s.orbsession", loop)
    deep: list = []
    for _ in range(990):
        deep = [deep]
    with pytest.raises(SessionError, match="nested more than 100 levels"):
        orbtool.save_session(tmp_path / "s.orbsession", {"x": deep})
    assert not (tmp_path / "s.orbsession").exists() and list(tmp_path.iterdir()) == []
    ok: list = []
    for _ in range(40):
        ok = [ok]
    orbtool.save_session(tmp_path / "s.orbsession", {"x": ok})
    assert orbtool.load_session(tmp_path / "s.orbsession") == {"x": ok}


@posix
def test_session_overwrite_keeps_mode(tmp_path):
    p = tmp_path / "s.orbsession"
    orbtool.save_session(p, {"x": 1})
    os.chmod(p, 0o644)
    orbtool.save_session(p, {"x": 2})
    assert os.stat(p).st_mode & 0o777 == 0o644
    os.chmod(p, 0o640)
    orbtool.save_session(p, {"x": 3})
    assert os.stat(p).st_mode & 0o777 == 0o640 and orbtool.load_session(p) == {"x": 3}


@posix
def test_killed_session_save_leaves_no_temporary_forever(tmp_path):
    """kill -9 while the session is being written: the old session is intact, and the temporary file
    is removed by the next save."""
    p = tmp_path / "s.orbsession"
    orbtool.save_session(p, {"x": np.arange(3.0)})
    child = _spawn("import os, numpy, orbtool\n"
                   "def stop(fd):\n    print('ready', flush=True)\n    import time; time.sleep(120)\n"
                   "os.fsync = stop\n"
                   f"orbtool.save_session({str(p)!r}, {{'x': numpy.zeros(200000)}})\n")
    temps = [q for q in tmp_path.iterdir() if q.name.endswith(TMP_SUFFIX)]
    _kill(child)
    assert len(temps) == 1 and temps[0].exists() and temps[0].stat().st_size > 0
    assert np.array_equal(orbtool.load_session(p)["x"], np.arange(3.0))
    # a temporary of a save still running in another live process is left alone
    busy = tmp_path / f".s.orbsession.{os.getppid()}.zz{TMP_SUFFIX}"
    busy.write_bytes(b"in progress")
    orbtool.save_session(p, {"x": 1})
    assert not temps[0].exists() and busy.exists()
    assert sorted(q.name for q in tmp_path.iterdir()) == sorted([p.name, busy.name])


def test_session_budget_keyword(tmp_path):
    p = orbtool.save_session(tmp_path / "s.orbsession", {"x": np.zeros(1000)})
    with pytest.raises(SessionError, match="memory budget of 100 bytes"):
        orbtool.load_session(p, max_bytes=100)
    assert orbtool.load_session(p)["x"].shape == (1000,)


# ------------------------------------------------------------------ the command line
def test_fit_json_folder_refused_before_work(tmp_path, capsys):
    from orbtool.cli import main
    assert main(["fit", str(tmp_path / "missing.toml"), "--json", str(tmp_path)]) == 1
    err = capsys.readouterr().err
    assert "is a folder" in err and "Traceback" not in err


def test_unreachable_scheduler_is_a_clear_error(tmp_path, capsys, monkeypatch):
    """--scheduler naming a port where nothing listens: an orbtool error after a bounded wait."""
    pytest.importorskip("distributed")
    import socket

    from orbtool import cli
    monkeypatch.setattr(cli, "SCHEDULER_TIMEOUT", 2)
    with socket.socket() as s:  # a free port, closed again: nothing listens there
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    rc = cli.main(["analyze", str(tmp_path / "missing.toml"), "--out", str(tmp_path / "out"),
                   "--scheduler", f"tcp://127.0.0.1:{port}", "--quiet"])
    err = capsys.readouterr().err
    assert rc == 1 and "cannot reach a dask scheduler within 2 s" in err
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------------ CSV cells
def test_csv_cells_cannot_become_formulas():
    """Text cells starting with = + - @ get a leading apostrophe (OWASP, "CSV Injection"); numbers,
    including negative ones, are unchanged."""
    from orbtool.family import CaseAnalysis, FamilyAnalysis
    res = FamilyAnalysis(family=None, results=[
        CaseAnalysis('=HYPERLINK("http://x","y")', {"motif": "@SUM(A1)", "variant": "+1", "cation": "-Sn"}, -1,
                     error="=cmd|' /C calc'!A0"),
        CaseAnalysis("plain", {"motif": "rocksalt", "variant": "relaxed", "cation": "Sn"}, 0, error="x")])
    rows = list(csv.DictReader(io.StringIO(res.to_csv())))
    bad, plain = rows
    assert bad["name"] == '\'=HYPERLINK("http://x","y")' and bad["motif"] == "'@SUM(A1)"
    assert bad["variant"] == "'+1" and bad["cation"] == "'-Sn" and bad["error"].startswith("'=")
    assert bad["charge"] == "-1"
    assert plain["name"] == "plain" and plain["motif"] == "rocksalt"
    assert res.table()[0]["name"] == '=HYPERLINK("http://x","y")'  # only the CSV text is neutralised
