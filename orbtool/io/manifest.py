"""A chemical family from a TOML manifest (schema in ``docs/manifest.md``).

Every problem in a manifest is collected and reported at once, each with
its line number, so a user fixes the file in one pass.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path

from ..case import (
    MAX_ABS_CHARGE,  # largest |charge| of a point defect, shared with DefectCase
    Family,
)
from ..errors import InputFormatError
from ._files import check_regular_file, read_bounded

__all__ = ["load_family", "check_manifest", "LABEL_KEYS", "MAX_MANIFEST_BYTES", "MAX_NESTING", "MAX_TABLES"]

#: free labels a case may carry directly (others go under ``[case.labels]``)
LABEL_KEYS = ("motif", "cation", "anion", "vacancy", "defect", "variant")
_FAMILY_KEYS = {"name", "description", "units"}
_HOST_KEYS = {"name", "path", "description", "units", "edges"}
_CASE_KEYS = {"name", "host", "path", "charge", "labels", "description", "units", *LABEL_KEYS}
#: values of the ``units`` key (cube value convention, see orbtool.io.read_grids)
UNIT_CHOICES = ("auto", "bohr", "angstrom")
_TOP_KEYS = {"family", "references", "host", "case"}

#: limits that keep a hostile or mistaken manifest from exhausting time or memory (a family of a
#: few hundred cases is ~50 kB, two or three levels deep)
MAX_MANIFEST_BYTES = 1_000_000
MAX_NESTING = 16
MAX_TABLES = 5000
#: keys of a [[case]] that a [case.labels] entry may not shadow
_RESERVED_LABELS = {"name", "charge", "path", "host", "labels", "description"}

_HEADER = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.\-]+)\s*\]\]?")
_KEY = re.compile(r'^\s*("?)([A-Za-z0-9_\-]+)\1\s*=')


def _line_map(text: str):
    """For each table instance, the line of its header and of each key.

    Returns ``{(table, index): {"": header_line, key: line}}`` where index counts array tables.
    """
    out = {("", 0): {"": 1}}
    counts: dict[str, int] = {}
    cur = ("", 0)
    sub = ""
    for i, line in enumerate(text.splitlines(), start=1):
        m = _HEADER.match(line)
        if m:
            name = m.group(2)
            sub = ""
            if m.group(1) == "[[":
                counts[name] = counts.get(name, -1) + 1
                cur = (name, counts[name])
            elif "." in name and name.split(".")[0] in counts:
                cur = (name.split(".")[0], counts[name.split(".")[0]])  # e.g. [case.labels]
                sub = name.split(".", 1)[1]
                out.setdefault(cur, {"": i})
                continue
            else:
                cur = (name, 0)
            out.setdefault(cur, {"": i})
            continue
        k = _KEY.match(line)
        if k:
            out.setdefault(cur, {"": i}).setdefault(k.group(2), i)
            if sub:  # keys of a sub-table also under "<sub>.<key>" (e.g. "labels.name")
                out[cur].setdefault(f"{sub}.{k.group(2)}", i)
    return out


def _too_deep(data) -> str | None:
    """Top-level key under which containers nest more than MAX_NESTING deep, or None (iterative)."""
    stack = [(v, 1, k) for k, v in data.items()]
    while stack:
        v, depth, top = stack.pop()
        if isinstance(v, (dict, list)):
            if depth > MAX_NESTING:
                return top
            stack.extend((x, depth + 1, top) for x in (v.values() if isinstance(v, dict) else v))
    return None


def check_manifest(path):
    """Parse and validate a manifest; returns (data, problems, lines) where problems is a list
    of (line, message)."""
    path = Path(path)
    try:
        if not path.exists():
            raise FileNotFoundError(path)
        check_regular_file(path)  # a FIFO or a device (/dev/zero) is refused before opening
        size = path.stat().st_size
        if size > MAX_MANIFEST_BYTES:
            raise InputFormatError(path, None, f"manifest is {size:,d} bytes, larger than the limit of "
                                   f"{MAX_MANIFEST_BYTES:,d} (is this really a family manifest?)")
        raw = read_bounded(path, MAX_MANIFEST_BYTES, "manifest")
        text = raw.decode("utf-8").removeprefix("\ufeff")  # a UTF-8 byte-order mark is not TOML
    except FileNotFoundError:
        raise InputFormatError(path, None, "manifest does not exist") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFormatError(path, None, f"cannot read manifest ({exc})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise InputFormatError(path, int(m.group(1)) if m else None, f"not valid TOML ({exc})") from None
    except RecursionError:  # the standard TOML parser recurses once per nesting level
        raise InputFormatError(path, None, f"values nested too deeply (limit {MAX_NESTING} levels)") from None
    deep = _too_deep(data)
    if deep is not None:
        raise InputFormatError(path, None, f"values nested too deeply under {deep!r} (limit {MAX_NESTING} levels)")
    n_tables = sum(len(data[k]) for k in ("host", "case") if isinstance(data.get(k), list))
    if n_tables > MAX_TABLES:
        raise InputFormatError(path, None, f"{n_tables} [[host]]/[[case]] tables, more than the limit of {MAX_TABLES}")
    lines = _line_map(text)
    problems: list[tuple[int | None, str]] = []
    base = path.parent

    def at(table, idx, key=""):
        t = lines.get((table, idx), {})
        return t.get(key, t.get(""))

    for k in data:
        if k not in _TOP_KEYS:
            problems.append((at(k, 0) or at("", 0, k), f"unknown top-level table or key {k!r} "
                             f"(allowed: {', '.join(sorted(_TOP_KEYS))})"))
    fam = data.get("family", {})
    if not isinstance(fam, dict):
        problems.append((at("", 0, "family"), "[family] must be a table"))
        fam = {}
    for k in fam:
        if k not in _FAMILY_KEYS:
            problems.append((at("family", 0, k), f"unknown key {k!r} in [family] (allowed: name, description, "
                             "units)"))
    _check_units(fam, lambda: at("family", 0, "units"), "[family]", problems)
    for k in ("name", "description"):
        if k in fam and not isinstance(fam[k], str):
            problems.append((at("family", 0, k), f"[family] {k} must be a string"))
    if "references" in data and not isinstance(data["references"], dict):
        problems.append((at("", 0, "references"), "[references] must be a table"))
    elif "references" in data:
        _check_references(data["references"], at, problems)
    hosts = data.get("host", [])
    cases = data.get("case", [])
    if not isinstance(hosts, list) or not isinstance(cases, list):
        problems.append((None, "use [[host]] and [[case]] (arrays of tables)"))
        hosts, cases = (hosts if isinstance(hosts, list) else []), (cases if isinstance(cases, list) else [])
    for kind, items in (("host", hosts), ("case", cases)):
        if not all(isinstance(x, dict) for x in items):
            problems.append((at("", 0, kind), f"{kind!r} must be written as [[{kind}]] tables, not a list of values"))
    hosts, cases = [h for h in hosts if isinstance(h, dict)], [c for c in cases if isinstance(c, dict)]
    host_names: dict[str, int] = {}
    for i, h in enumerate(hosts):
        for k in h:
            if k not in _HOST_KEYS:
                problems.append((at("host", i, k), f"unknown key {k!r} in [[host]] #{i + 1} "
                                 f"(allowed: {', '.join(sorted(_HOST_KEYS))})"))
        _required(h, ("name", "path"), "host", i, at, problems)
        name = h.get("name")
        if isinstance(name, str):
            if name in host_names:
                problems.append((at("host", i, "name"), f"duplicate host name {name!r} "
                                 f"(first at line {host_names[name]})"))
            else:
                host_names[name] = at("host", i, "name")
        _check_path(h.get("path"), base, "host", i, at, problems)
        _check_units(h, lambda: at("host", i, "units"), f"[[host]] #{i + 1}", problems)
        if "edges" in h and not (isinstance(h["edges"], (int, float, str)) and not isinstance(h["edges"], bool)):
            problems.append((at("host", i, "edges"), "edges must be a band-structure file (path) or the true gap (eV)"))
        elif isinstance(h.get("edges"), str) and not (base / h["edges"]).is_file():
            problems.append((at("host", i, "edges"), f"edges file {h['edges']!r} does not exist (relative to the "
                             "manifest)"))
    case_names: dict[str, int] = {}
    if not cases:
        problems.append((None, "no [[case]] tables"))
    for i, c in enumerate(cases):
        for k in c:
            if k not in _CASE_KEYS:
                problems.append((at("case", i, k), f"unknown key {k!r} in [[case]] #{i + 1} (allowed: "
                                 f"{', '.join(sorted(_CASE_KEYS))}; put other labels under [case.labels])"))
        _required(c, ("name", "path"), "case", i, at, problems)
        name = c.get("name")
        if isinstance(name, str):
            if name in case_names:
                problems.append((at("case", i, "name"), f"duplicate case name {name!r} "
                                 f"(first at line {case_names[name]})"))
            else:
                case_names[name] = at("case", i, "name")
        if "host" in c and not isinstance(c["host"], str):
            problems.append((at("case", i, "host"), f"host of case {name!r} must be a string naming a [[host]]"))
        elif "host" in c and c["host"] not in host_names:
            problems.append((at("case", i, "host"), f"case {name!r} names host {c['host']!r}, which no [[host]] "
                             f"defines (hosts: {', '.join(host_names) or 'none'})"))
        _check_case_values(c, i, at, problems)
        _check_path(c.get("path"), base, "case", i, at, problems)
        _check_units(c, lambda: at("case", i, "units"), f"[[case]] #{i + 1}", problems)
    return data, problems, lines


def _check_units(tab, line, where, problems):
    if "units" in tab and tab["units"] not in UNIT_CHOICES:
        problems.append((line(), f"units of {where} must be one of {', '.join(UNIT_CHOICES)}, got {tab['units']!r}"))


def _label_ok(v) -> bool:
    """A label is a string, an integer or a finite number (labels group and name cases)."""
    if isinstance(v, bool):
        return True
    if isinstance(v, float):
        return math.isfinite(v)
    return isinstance(v, (str, int))


def _check_case_values(c, i, at, problems):
    """Types and ranges of a case's charge and labels (each problem with its line)."""
    name = c.get("name")
    if "charge" in c:
        q = c["charge"]
        if not isinstance(q, int) or isinstance(q, bool):
            problems.append((at("case", i, "charge"), f"charge of case {name!r} must be an integer, got {q!r}"))
        elif abs(q) > MAX_ABS_CHARGE:
            shown = str(q) if len(str(q)) <= 12 else f"{str(q)[:6]}…({len(str(abs(q)))} digits)"
            problems.append((at("case", i, "charge"), f"charge of case {name!r} is {shown}: a point defect's "
                             f"charge state must lie within ±{MAX_ABS_CHARGE} electrons (a typo?)"))
    for k in LABEL_KEYS:
        if k in c and not _label_ok(c[k]):
            problems.append((at("case", i, k), f"label {k!r} of case {name!r} must be a string or a finite "
                             f"number, got {type(c[k]).__name__} {c[k]!r}"))
    if "labels" in c and not isinstance(c["labels"], dict):
        problems.append((at("case", i, "labels"), "labels must be a table"))
    elif "labels" in c:
        for k, v in c["labels"].items():
            line = at("case", i, f"labels.{k}")
            if k in _RESERVED_LABELS:
                problems.append((line, f"[case.labels] {k!r} of case {name!r} would hide the case's "
                                 f"own {k}; set {k} in the [[case]] table itself, or use another label name"))
            elif k in c and k in LABEL_KEYS:
                problems.append((line, f"label {k!r} of case {name!r} is given twice (in [[case]] "
                                 "and in [case.labels]); keep one"))
            elif not _label_ok(v):
                problems.append((line, f"[case.labels] {k!r} of case {name!r} must be a string or a "
                                 f"finite number, got {type(v).__name__} {v!r}"))


def _check_references(refs, at, problems):
    """``[references]``: ``mu`` a table element → finite chemical potential (eV/atom); ``dielectric``
    a positive number, a 3×3 table of numbers, or a table of those keyed by label."""
    from ase.data import chemical_symbols
    if "mu" in refs:
        mu, line = refs["mu"], at("references", 0, "mu")
        if not isinstance(mu, dict):
            problems.append((line, f"[references] mu must be a table of element = chemical potential in eV/atom "
                             f"(e.g. mu = {{ Ga = -3.03 }}), got {type(mu).__name__} {mu!r}"))
        else:
            for el, v in mu.items():
                if el not in chemical_symbols[1:]:
                    problems.append((line, f"[references] mu: {el!r} is not an element symbol"))
                elif isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                    problems.append((line, f"[references] mu.{el} must be a finite number (eV/atom), got {v!r}"))
    if "dielectric" in refs:
        d, line = refs["dielectric"], at("references", 0, "dielectric")

        def ok(x):
            if isinstance(x, bool):
                return False
            if isinstance(x, (int, float)):
                return math.isfinite(x) and x > 0
            return (isinstance(x, list) and len(x) == 3 and all(isinstance(r, list) and len(r) == 3 for r in x)
                    and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                            for r in x for v in r))
        if not (ok(d) or (isinstance(d, dict) and d and all(ok(v) for v in d.values()))):
            problems.append((line, "[references] dielectric must be a positive number, a 3×3 array of numbers, or "
                             f"a table of those keyed by a label value; got {d!r}"))


def _required(tab, keys, kind, i, at, problems):
    for k in keys:
        if k not in tab:
            problems.append((at(kind, i), f"[[{kind}]] #{i + 1} lacks the required key {k!r}"))
        elif not isinstance(tab[k], str) or not tab[k]:
            problems.append((at(kind, i, k), f"{k!r} of [[{kind}]] #{i + 1} must be a non-empty string"))


def _check_path(value, base, kind, i, at, problems):
    if isinstance(value, str) and value:
        p = (base / value)
        if not p.exists():
            what = "does not exist"
            problems.append((at(kind, i, "path"), f"{kind} path {value!r} {what} (relative to the manifest)"))


def raise_manifest_problems(path, problems) -> None:
    """Raise one :class:`InputFormatError` listing every ``(line, message)`` problem (none: return)."""
    if problems:
        problems.sort(key=lambda p: (p[0] is None, p[0] or 0))
        body = "\n".join(f"  - line {ln}: {msg}" if ln else f"  - {msg}" for ln, msg in problems)
        raise InputFormatError(path, problems[0][0], f"{len(problems)} problem(s) in the manifest:\n{body}")


def case_sources(data, base):
    """For each ``[[case]]`` of a checked manifest: its labels, reading units and the true band edges
    of its host (a path under ``base`` or a gap in eV), the choices :func:`load_family` and the batch
    runner (:mod:`orbtool.batch`) both make."""
    fam_units = data.get("family", {}).get("units", "auto")
    hosts = {h["name"]: h for h in data.get("host", [])}
    for c in data.get("case", []):
        labels = {k: c[k] for k in LABEL_KEYS if k in c}
        labels.update(c.get("labels", {}))
        host = hosts.get(c.get("host"), {})
        edges = host.get("edges")
        if isinstance(edges, str):
            edges = base / edges
        yield c, labels, c.get("units", fam_units), host.get("units", fam_units), edges


def load_family(manifest_path, *, grids: bool = True) -> Family:
    """Read a family manifest (TOML, see docs/manifest.md) and load every case.

    Paths are relative to the manifest. All schema problems (unknown keys, missing files,
    duplicate names, unknown hosts, wrong types) are reported together in one
    :class:`InputFormatError`, each with its line number. Each host folder is read once.
    """
    from .assemble import load_case, scan_run

    path = Path(manifest_path)
    data, problems, lines = check_manifest(path)
    raise_manifest_problems(path, problems)
    base = path.parent
    host_runs = {}
    fam_units = data.get("family", {}).get("units", "auto")
    for h in data.get("host", []):
        host_runs[h["name"]] = scan_run(base / h["path"], grids=grids, units=h.get("units", fam_units))
    cases = []
    for c, labels, units, _, edges in case_sources(data, base):
        hr = host_runs.get(c.get("host"))
        case = load_case(base / c["path"], charge=int(c.get("charge", 0)), name=c["name"], labels=labels,
                         grids=grids, units=units, edges=edges, _host_run=hr)
        if hr is not None:
            case = case.replace(provenance=case.provenance + (f"host {c['host']!r} from the manifest",))
        cases.append(case)
    fam = data.get("family", {})
    return Family(cases=tuple(cases), name=fam.get("name", path.stem), references=dict(data.get("references", {})),
                  source=str(path), meta={"description": fam.get("description", ""),
                                          "hosts": {h["name"]: h["path"] for h in data.get("host", [])}})
