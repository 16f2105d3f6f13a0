"""The host's true band edges, from a band-structure file or from the user.

A Γ-only supercell samples the host's Brillouin zone only at the k-points that fold onto Γ; when
the band extrema lie elsewhere (the CBM of AlP and GaP near X, for instance) the supercell's
Γ "gap" is too wide. The true edges come from a k-resolved calculation of the host on the same
energy scale as the pristine supercell (the same code, recipe and average-potential convention).

Accepted band-structure file (JSON, one object; what ``tests/external/periodic/generate.py``
writes as ``bands.json``)::

    {"vbm": -1.234, "cbm": 1.456,            # eV, required: true extrema over the sampled k-points
     "gap": 2.69,                           # optional; checked against cbm - vbm (1 meV)
     "gamma_vbm": ..., "gamma_cbm": ...,    # optional: the same bands at Γ, eV
     "vbm_k": [kx, ky, kz], "cbm_k": [...], # optional: where the extrema are (fractional)
     "note": "..."}                          # optional free text

Everything else is ignored. Energies are on the code's scale for the bulk crystal, which must be
the scale of the pristine supercell (the file's ``note`` should say so).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from ..errors import InputFormatError
from ._files import read_text

__all__ = ["read_band_edges", "looks_like_band_edges", "edges_from_user"]


def looks_like_band_edges(path) -> bool:
    """True if ``path`` is a JSON object with numeric ``vbm`` and ``cbm`` (cheap; never raises)."""
    try:
        data = json.loads(read_text(path))
    except Exception:  # not JSON, unreadable: not a band-structure file
        return False
    return isinstance(data, dict) and all(isinstance(data.get(k), (int, float)) for k in ("vbm", "cbm"))


def _finite(data, key, path):
    v = data.get(key)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputFormatError(path, None, f"{key!r} must be a finite number (eV), got {v!r}", field=key)
    return float(v)


def read_band_edges(path) -> dict:
    """True band edges of a host from a band-structure JSON file (layout in the module docstring).

    Returns
    -------
    dict with ``vbm``, ``cbm``, ``gap`` (eV), optional ``gamma_vbm``/``gamma_cbm`` (eV),
    ``vbm_k``/``cbm_k``, and ``source`` and ``method`` (text for provenance).
    """
    p = Path(path)
    try:
        data = json.loads(read_text(p))
    except json.JSONDecodeError as exc:
        raise InputFormatError(p, exc.lineno, f"not valid JSON ({exc.msg})") from None
    if not isinstance(data, dict):
        raise InputFormatError(p, None, "expected a JSON object with 'vbm' and 'cbm' (eV)")
    out = {"vbm": _finite(data, "vbm", p), "cbm": _finite(data, "cbm", p)}
    if not out["cbm"] > out["vbm"]:
        raise InputFormatError(p, None, f"cbm {out['cbm']} eV is not above vbm {out['vbm']} eV", field="cbm")
    out["gap"] = out["cbm"] - out["vbm"]
    if "gap" in data and abs(_finite(data, "gap", p) - out["gap"]) > 1e-3:
        raise InputFormatError(p, None, f"gap {data['gap']} eV disagrees with cbm - vbm = {out['gap']:.4f} eV",
                               field="gap")
    for key in ("gamma_vbm", "gamma_cbm"):
        if key in data:
            out[key] = _finite(data, key, p)
    for key in ("vbm_k", "cbm_k"):
        if isinstance(data.get(key), list):
            out[key] = [float(x) for x in data[key]]
    out["source"] = str(p)
    out["method"] = f"true band edges from the band-structure file {p.name}"
    return out


def edges_from_user(edges, *, source=None) -> dict | None:
    """Normalise what a user passes as ``edges=``: a path to a band-structure JSON, a mapping with
    ``vbm`` and ``cbm`` (eV), or a number (the true gap, eV: the CBM is put at the data's VBM + gap).

    Returns the dict of :func:`read_band_edges` (``gap_only`` True for a bare gap), or None.
    """
    if edges is None:
        return None
    if isinstance(edges, (str, Path)):
        return read_band_edges(edges)
    if isinstance(edges, bool):
        raise InputFormatError(source, None, "edges must be a file, a mapping or a gap (eV)", field="edges")
    if isinstance(edges, (int, float)):
        if not (math.isfinite(edges) and edges > 0):
            raise InputFormatError(source, None, f"gap must be a positive number of eV, got {edges!r}", field="gap")
        return {"gap": float(edges), "gap_only": True, "source": "given by the user",
                "method": f"true gap {float(edges):.4f} eV given by the user (VBM from the data)"}
    if hasattr(edges, "vbm") and hasattr(edges, "cbm"):
        edges = {"vbm": edges.vbm, "cbm": edges.cbm}
    if isinstance(edges, dict):
        out = {"vbm": _finite(edges, "vbm", source), "cbm": _finite(edges, "cbm", source)}
        if not out["cbm"] > out["vbm"]:
            raise InputFormatError(source, None, "edges: cbm must lie above vbm", field="edges")
        out.update(gap=out["cbm"] - out["vbm"], source="given by the user",
                   method=f"true band edges given by the user (VBM {out['vbm']:.4f}, CBM {out['cbm']:.4f} eV)")
        for key in ("gamma_vbm", "gamma_cbm"):
            if key in edges:
                out[key] = _finite(edges, key, source)
        return out
    raise InputFormatError(source, None, f"edges must be a band-structure file, a mapping with 'vbm' and 'cbm' or "
                           f"a gap in eV, got {type(edges).__name__}", field="edges")
