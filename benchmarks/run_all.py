"""Run every benchmark script in this folder, one after another (``make bench``).

Each script prints its own ratios against a reference run in the same
process; nothing here asserts a time.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

here = Path(__file__).parent
#: long runs with their own make targets (bench-family; the browser one needs JupyterLab and Chromium)
OWN_TARGET = {"bench_family.py", "bench_app_browser.py"}
failed = []
for script in sorted(p for p in here.glob("bench_*.py") if p.name not in OWN_TARGET):
    print(f"\n=== {script.name} ===", flush=True)
    if subprocess.call([sys.executable, str(script)]) != 0:
        failed.append(script.name)
if failed:
    print(f"\nbenchmarks that failed to run: {', '.join(failed)}")
    sys.exit(1)
