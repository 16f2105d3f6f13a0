"""Families at scale (run: python benchmarks/bench_family.py [N ...]; default 14 100).

For each family size N (synthetic copies of the demo cases, ``synthetic_family.py``) and 1 and 2
worker processes, one fresh process runs ``analyze_family(manifest, workers=w)`` (cases read in the
workers) and reports: wall time per case, CPU time per case summed over the workers (independent of
the machine's load), the speed-up of 2 workers over 1 (wall), and the main process's peak resident
memory. For comparison the old route — ``load_family`` in the main process, then the analysis — is run
once per N with 2 workers. Goals (issue 20): ≤ 0.06 s per case at 1000 cases on 2 cores, parent peak
≤ 500 MB whatever N, 2 workers ≥ 1.7× one. The load average is printed beside every number: on a
busy machine the wall-time ratios mean little, the CPU time per case still does.
Grid cache: a fresh temporary folder (cold at the start of each N).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

here = Path(__file__).parent

_CHILD = r"""
import json, os, resource, sys, time
from orbtool.batch import analyze_family
manifest, workers, route = sys.argv[1], int(sys.argv[2]), sys.argv[3]
t0 = time.perf_counter()
if route == "parent":
    from orbtool.io import load_family
    res = analyze_family(load_family(manifest), workers=workers, progress=False)
else:
    res = analyze_family(manifest, workers=workers, progress=False)
wall = time.perf_counter() - t0
st = res.batch["cases"].values()
print(json.dumps({"wall": wall, "cpu_cases": sum(s["cpu"] for s in st), "n": len(res.results),
                  "errors": len(res.errors), "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "load": open("/proc/loadavg").read().split()[:3]}))
"""


def run(manifest, workers, route, cache):
    env = {**os.environ, "ORBTOOL_CACHE_DIR": cache, "PYTHONPATH": os.pathsep.join(
        [str(here.parent)] + ([os.environ["PYTHONPATH"]] if os.environ.get("PYTHONPATH") else []))}
    out = subprocess.run([sys.executable, "-c", _CHILD, str(manifest), str(workers), route], env=env,
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(sizes):
    sys.path.insert(0, str(here))
    from synthetic_family import make_family
    for n in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            manifest = make_family(Path(tmp) / "fam", n)
            cache = str(Path(tmp) / "cache")
            res = {w: run(manifest, w, "workers", cache) for w in (1, 2)}
            for w, r in res.items():
                print(f"N={n:5d} workers={w}: {r['wall'] / n:.3f} s/case wall, {r['cpu_cases'] / n:.3f} s/case CPU "
                      f"(summed over workers), parent peak {r['peak_mb']:.0f} MB, errors {r['errors']}, "
                      f"load {' '.join(r['load'])}", flush=True)
            print(f"N={n:5d} speed-up 2 workers vs 1: {res[1]['wall'] / res[2]['wall']:.2f}x (wall)", flush=True)
            old = run(manifest, 2, "parent", cache)
            print(f"N={n:5d} old route (read in the parent), 2 workers: {old['wall'] / n:.3f} s/case wall, parent peak "
                  f"{old['peak_mb']:.0f} MB, load {' '.join(old['load'])}", flush=True)


if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [14, 100])
