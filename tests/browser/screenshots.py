"""Refresh the committed app pictures (run by hand or by a make target, never by the tests).

    python tests/browser/screenshots.py

runs the browser tests with their screenshots in a temporary folder, then copies
the whole-app picture to ``sample_outputs/app_screenshot.png`` and one picture of
every tab (after the knobs were moved by keys) to ``docs/screenshots/``.
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
PICKED.update({f"2_keys_{t}.png": f"docs/screenshots/app_{t}.png"
               for t in ("load", "structure", "pdos", "level_explorer", "family")})
PICKED.update({"4_single_cube_structure.png": "docs/screenshots/app_single_cube.png",
               "3_restored_structure.png": "docs/screenshots/app_restored_structure.png"})


def main() -> int:
    shots = Path(tempfile.mkdtemp(prefix="orbtool-shots-"))
    env = dict(os.environ, ORBTOOL_BROWSER_ARTIFACTS=str(shots), PYTHONPATH=str(ROOT))
    rc = subprocess.call([sys.executable, "-m", "pytest", "-q", "-m", "browser", str(ROOT / "tests" / "browser")],
                         env=env, cwd=ROOT)
    if rc != 0:
        print(f"browser tests failed (exit {rc}); nothing copied. Pictures so far: {shots}")
        return rc
    for src, dst in PICKED.items():
        if (shots / src).exists():
            (ROOT / dst).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy(shots / src, ROOT / dst)
            print(f"{dst} ← {src}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
