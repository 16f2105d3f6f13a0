"""Running a family's cases in parallel: the worker side of :func:`analyze_family`.

Two routes:

* ``analyze_family(family)`` with a loaded :class:`~orbtool.case.Family` sends
  each case to a worker and gets its :class:`~orbtool.family.CaseAnalysis`
  back (the cases were already read in this process).
* ``analyze_family("family.toml")`` with a manifest path reads *and* analyses
  every case inside the workers. The parent reads only the manifest and keeps
  summaries: each case comes back without its PDOS, band projections and
  state/density grids (potential grids, which the charged-cell correction
  needs, are kept), and the host PDOS/projections come back once per host. A
  case that cannot be read (a half-written PROCAR of a run still going, a
  missing structure ...) becomes a row with its reason; the others go on.
  :func:`full_case` re-reads one case with all its arrays (for figures).

Workers are local processes (:mod:`concurrent.futures`) or a
``dask.distributed`` cluster (a ``Client`` or a scheduler address such as
``tcp://10.0.0.5:8786``; see ``docs/scaling.md`` for starting one across
machines with dask's own ``dask scheduler`` / ``dask worker`` commands).
"""

from __future__ import annotations

import os
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

from .errors import OrbtoolError

__all__ = ["analyze_family", "CaseSpec", "plan_family", "full_case", "CONNECT_TIMEOUT"]

#: seconds to wait for a dask scheduler given by address before giving up with a clear error
CONNECT_TIMEOUT = 10.0


@dataclass(frozen=True)
class CaseSpec:
    """Where one case of a manifest lives (all a worker needs to read it; picklable)."""

    name: str
    path: str
    charge: int = 0
    labels: dict = field(default_factory=dict)
    host: str | None = None
    host_path: str | None = None
    grids: bool = True
    units: str = "auto"          # how the case's cubes are read (manifest ``units``)
    host_units: str = "auto"
    edges: object = None         # true band edges of the host (path or gap, manifest ``edges``)


def plan_family(manifest_path, *, grids: bool = True):
    """Validate a manifest and list its cases without reading any of them.

    Returns ``(specs, info)``: a list of :class:`CaseSpec` and the keyword
    arguments of the :class:`~orbtool.case.Family` (name, references, source,
    meta). Schema problems raise one :class:`InputFormatError` listing all of
    them, exactly as :func:`orbtool.io.load_family` does.
    """
    from .io.manifest import case_sources, check_manifest, raise_manifest_problems

    path = Path(manifest_path)
    data, problems, _ = check_manifest(path)
    raise_manifest_problems(path, problems)
    base = path.parent
    hosts = {h["name"]: str(base / h["path"]) for h in data.get("host", [])}
    specs = []
    for c, labels, units, host_units, edges in case_sources(data, base):
        specs.append(CaseSpec(name=c["name"], path=str(base / c["path"]), charge=int(c.get("charge", 0)),
                              labels=labels, host=c.get("host"), host_path=hosts.get(c.get("host")), grids=grids,
                              units=units, host_units=host_units, edges=None if edges is None else
                              (str(edges) if isinstance(edges, Path) else edges)))
    fam = data.get("family", {})
    info = {"name": fam.get("name", path.stem), "references": dict(data.get("references", {})),
            "source": str(path), "meta": {"description": fam.get("description", ""),
                                          "hosts": {h["name"]: h["path"] for h in data.get("host", [])}}}
    return specs, info


# ------------------------------------------------------------------ worker side
_HOST_RUNS: dict = {}  # per worker process: host folder -> RunData (each host read once per worker)


def _host_run(spec: CaseSpec):
    from .io.assemble import scan_run
    p = Path(spec.host_path)
    st = p.stat()
    key = (str(p.resolve()), spec.grids, spec.host_units, st.st_mtime_ns)
    run = _HOST_RUNS.get(key)
    if run is None:
        if len(_HOST_RUNS) > 8:  # a family has a few hosts; keep the worker's memory bounded anyway
            _HOST_RUNS.clear()
        run = _HOST_RUNS[key] = scan_run(p, grids=spec.grids, units=spec.host_units)
    return run


def _light(case, keep_host: bool):
    """The case without its per-case arrays (potential grids kept for the charged-cell correction)."""
    pot = {k: g for k, g in case.grids.items() if k == "potential"}
    host_pot = {k: g for k, g in case.host_grids.items() if k == "potential"}
    return case.replace(defect_pdos=None, projections=None, grids=pot, host_grids=host_pot,
                        host_pdos=case.host_pdos if keep_host else None,
                        host_projections=case.host_projections if keep_host else None,
                        provenance=case.provenance + ("PDOS, band projections and state/density grids were read "
                                                      "in a worker and not kept (orbtool.batch.full_case re-reads "
                                                      "them)",))


def _load(spec: CaseSpec):
    from .io.assemble import load_case
    hr = _host_run(spec) if spec.host_path else None
    case = load_case(spec.path, charge=spec.charge, name=spec.name, labels=spec.labels, grids=spec.grids,
                     units=spec.units, edges=spec.edges, _host_run=hr)
    if hr is not None:
        case = case.replace(provenance=case.provenance + (f"host {spec.host!r} from the manifest",))
    return case


def _reason(exc: BaseException) -> str:
    if isinstance(exc, OrbtoolError):
        return str(exc)
    # not an orbtool error: a reader let something through; still one row, with the reason
    return f"could not be read ({type(exc).__name__}: {exc})"


def _run_spec(spec: CaseSpec, keep_host: bool = False):
    """Worker task: read, analyse and reduce one case. Returns (CaseAnalysis, light case or None, stats).

    The small eigenproblems of the analysis run with one BLAS thread (the workers already fill the
    cores; see :func:`orbtool.tb.inverse.single_blas_thread`).
    """
    from .tb.inverse import single_blas_thread
    with single_blas_thread():
        return _run_spec_body(spec, keep_host)


def _run_spec_body(spec: CaseSpec, keep_host: bool):
    from .family import CaseAnalysis, analyze_case
    t0, c0 = time.perf_counter(), time.process_time()
    light = None
    try:
        case = _load(spec)
    except Exception as exc:  # noqa: BLE001 — a broken case is a row with its reason, never an aborted family
        res = CaseAnalysis(spec.name, dict(spec.labels), spec.charge, error=_reason(exc))
    else:
        res = analyze_case(case)
        light = _light(case, keep_host)
        del case
    stats = {"pid": os.getpid(), "wall": time.perf_counter() - t0, "cpu": time.process_time() - c0}
    return res, light, stats


def _run_case(case):
    """Worker task for an already loaded case (one BLAS thread, as :func:`_run_spec`)."""
    from .family import analyze_case
    from .tb.inverse import single_blas_thread
    t0, c0 = time.perf_counter(), time.process_time()
    with single_blas_thread():
        res = analyze_case(case)
    return res, None, {"pid": os.getpid(), "wall": time.perf_counter() - t0, "cpu": time.process_time() - c0}


# ------------------------------------------------------------------ parent side
def _progress(total, enabled, desc):
    if not enabled:
        return None
    from tqdm.auto import tqdm
    return tqdm(total=total, desc=desc, unit="case", leave=False)


def _client(client):
    from dask.distributed import Client
    if not isinstance(client, str):
        return client, False
    try:
        return Client(client, timeout=CONNECT_TIMEOUT), True
    except (OSError, TimeoutError) as exc:
        raise OrbtoolError(f"no dask scheduler answered at {client!r} within {CONNECT_TIMEOUT:.0f} s ({exc}); "
                           "start one with `dask scheduler` and workers with `dask worker ADDRESS` "
                           "(docs/scaling.md), or leave out --scheduler to use local processes") from None


def _execute(fn, items, *, workers, client, progress, extra=None):
    """Run ``fn(item, extra_i)`` over ``items``; yields results as they complete."""
    extra = extra or [False] * len(items)
    bar = _progress(len(items), progress, "analysing cases")
    try:
        if client is not None:
            from dask.distributed import as_completed as dask_completed
            cl, own = _client(client)
            try:
                # each item is small (a spec) or scattered once (a loaded case), never embedded in the graph
                data = items if fn is _run_spec else cl.scatter(list(items))
                futures = cl.map(fn, data, extra, pure=False) if fn is _run_spec else cl.map(fn, data, pure=False)
                for fut in dask_completed(futures):
                    yield fut.result()
                    if bar:
                        bar.update()
            finally:
                if own:
                    cl.close()
            return
        n = workers or os.cpu_count() or 1
        if n <= 1 or len(items) <= 1:
            for it, x in zip(items, extra):
                yield fn(it, x) if fn is _run_spec else fn(it)
                if bar:
                    bar.update()
            return
        with ProcessPoolExecutor(max_workers=min(n, len(items))) as ex:
            futs = [ex.submit(fn, it, x) if fn is _run_spec else ex.submit(fn, it) for it, x in zip(items, extra)]
            for f in as_completed(futs):
                yield f.result()
                if bar:
                    bar.update()
    finally:
        if bar:
            bar.close()


def analyze_family(family, *, workers: int | None = None, client=None, progress: bool = True):
    """Analyse every case of ``family``.

    Parameters
    ----------
    family : Family or path
        A loaded :class:`~orbtool.case.Family`, or the path of a family
        manifest (TOML): then each case is read in the worker that analyses
        it and the parent keeps only summaries (see the module docstring).
    workers : int, optional
        Worker processes (default ``os.cpu_count()``; 1 = run in this process).
    client : dask.distributed.Client or str, optional
        Run on dask instead (a ``Client`` or a scheduler address).
    progress : bool
        Show a progress bar (terminal or notebook).

    Returns
    -------
    FamilyAnalysis
        One :class:`~orbtool.family.CaseAnalysis` per case in manifest
        order. Its attribute ``batch`` records per case the worker's
        process id, wall and CPU time (s), and the total wall time.
    """
    from .case import Family
    from .family import FamilyAnalysis

    t0 = time.perf_counter()
    if isinstance(family, (str, os.PathLike)):
        specs, info = plan_family(family)
        first_of_host = {}
        for s in specs:
            first_of_host.setdefault(s.host, s.name)
        keep = [first_of_host[s.host] == s.name and s.host is not None for s in specs]
        outcomes = list(_execute(_run_spec, specs, workers=workers, client=client, progress=progress, extra=keep))
        results = {r.name: r for r, _, _ in outcomes}
        lights = {c.name: c for _, c, _ in outcomes if c is not None}
        hosts = {}  # one host PDOS/projections object per host, shared by its cases
        for s in specs:
            c = lights.get(s.name)
            if c is not None and (c.host_pdos is not None or c.host_projections is not None):
                hosts.setdefault(s.host, (c.host_pdos, c.host_projections))
        cases = []
        for s in specs:
            c = lights.get(s.name)
            if c is None:
                continue
            hp, hj = hosts.get(s.host, (None, None))
            cases.append(c.replace(host_pdos=hp, host_projections=hj) if s.host in hosts else c)
        meta = dict(info["meta"])
        meta["specs"] = {s.name: s for s in specs}
        fam = Family(cases=tuple(cases), name=info["name"], references=info["references"], source=info["source"],
                     meta=meta)
        order = [s.name for s in specs]
    else:
        cases = list(family.cases)
        outcomes = list(_execute(_run_case, cases, workers=workers, client=client, progress=progress))
        results = {r.name: r for r, _, _ in outcomes}
        fam = family
        order = [c.name for c in cases]
    res = FamilyAnalysis(fam, [results[n] for n in order])
    res.batch = {"cases": {r.name: st for r, _, st in outcomes},
                 "workers": "dask" if client is not None else (workers or os.cpu_count() or 1),
                 "wall": time.perf_counter() - t0}
    return res


def full_case(family, name: str):
    """Case ``name`` of ``family`` with all its arrays: re-read from its folders when the
    family came from :func:`analyze_family` on a manifest (summaries only), else as held."""
    spec = (family.meta or {}).get("specs", {}).get(name)
    if spec is None:
        return family[name]
    return _load(spec)
