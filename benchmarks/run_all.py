"""Run every benchmark script in this folder, one after another (``make bench``).

Each script prints its own ratios against a reference run in the same
process; nothing here asserts a time.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

here = Path(__file__).parent
failed = []
for script in sorted(here.glob("bench_*.py")):
    print(f"\n=== {script.name} ===", flush=True)
    if subprocess.call([sys.executable, str(script)]) != 0:
        failed.append(script.name)
if failed:
    print(f"\nbenchmarks that failed to run: {', '.join(failed)}")
    sys.exit(1)
