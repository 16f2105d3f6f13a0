"""Refresh the committed app pictures (run by hand or by a make target, never by the tests).

    python tests/browser/screenshots.py

runs the browser tests with their screenshots in a temporary folder, then copies
the whole-app picture to ``sample_outputs/app_screenshot.png`` and the picture of
every tab after each step of the app check (1 loaded with a knob set by code,
2 after keys moved a slider, 3 after Restore on the Structure tab, 4 after a
single cube was loaded by path) to ``docs/screenshots/app_<step>_<tab>.png``;
pictures of an earlier layout there are removed first.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PICKED = {"app.png": "sample_outputs/app_screenshot.png"}
STEPS = ("1_loaded", "2_keys", "3_restored", "4_single_cube")
TABS = ("load", "structure", "pdos", "level_explorer", "family")
PICKED.update({f"{s}_{t}.png": f"docs/screenshots/app_{s}_{t}.png" for s in STEPS for t in TABS})


def main() -> int:
    shots = Path(tempfile.mkdtemp(prefix="orbtool-shots-"))
    env = dict(os.environ, ORBTOOL_BROWSER_ARTIFACTS=str(shots), PYTHONPATH=str(ROOT))
    rc = subprocess.call([sys.executable, "-m", "pytest", "-q", "-m", "browser", str(ROOT / "tests" / "browser")],
                         env=env, cwd=ROOT)
    if rc != 0:
        print(f"browser tests failed (exit {rc}); nothing copied. Pictures so far: {shots}")
        return rc
    missing = [src for src in PICKED if not (shots / src).exists()]
    if missing:
        print(f"pictures missing: {missing}; nothing copied. Pictures so far: {shots}")
        return 1
    for old in (ROOT / "docs" / "screenshots").glob("app_*.png"):
        old.unlink()
    for src, dst in PICKED.items():
        (ROOT / dst).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy(shots / src, ROOT / dst)
        print(f"{dst} ← {src}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
