"""Python-side cost of one level-explorer event (goal: ≤ 50 ms).

Reference in the same process: the bare ``fit.predict(...)`` call with the
same knobs — the science the event cannot avoid. Printed: milliseconds per
event for the widget update and for the reference, and their ratio (the
widget's own overhead is ratio − 1): building the diagram data,
reassigning the ColumnDataSources and formatting the readout (incl. the
SRH factor).

Run: ``python benchmarks/bench_widgets.py``
"""

from __future__ import annotations

import time

import numpy as np
from ase.build import bulk


def _best(fn, repeat=7, number=5):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        best = min(best, (time.perf_counter() - t0) / number)
    return best


def main():
    from orbtool import analysis, tb
    from orbtool.widgets import LevelExplorer

    host = bulk("Si", "diamond", a=5.431, cubic=True).repeat(2)
    defect = host.copy()
    del defect[0]
    site = analysis.locate_vacancy(host, defect)
    fit = tb.fit(tb.ClusterModel.around(site, orbitals="hybrid"),
                 [tb.Target("Si_vac", above_vbm=0.6, gap=1.1, site=site)])
    le = LevelExplorer(fit, site)
    values = iter(np.tile(np.linspace(le.coupling.min, le.coupling.max, 40), 100))

    def widget_coupling():
        le.coupling.value = float(next(values))

    cs = iter(np.tile(np.linspace(le.coupling.min, le.coupling.max, 40), 100))

    def bare_coupling():
        fit.predict(coupling_scale=float(next(cs)))

    breaths = iter(np.tile(np.linspace(-0.1, 0.1, 21), 100))

    def widget_breathing():
        le.breathing.value = float(next(breaths))

    breaths2 = iter(np.tile(np.linspace(-0.1, 0.1, 21), 100))

    def bare_breathing():
        fit.predict(geometry=site.breathe(float(next(breaths2))))

    print("level explorer, one slider event (Python side)")
    for name, w, b in (("coupling scale", widget_coupling, bare_coupling),
                       ("breathing", widget_breathing, bare_breathing)):
        tw, tb_ = _best(w), _best(b)
        print(f"  {name:<15} widget {1e3 * tw:7.2f} ms   bare predict {1e3 * tb_:7.2f} ms   "
              f"ratio {tw / tb_:5.2f}   goal ≤ 50 ms: {'met' if tw <= 0.05 else 'NOT met'}")


if __name__ == "__main__":
    main()
