"""The fixed-column number decoder used by the PROCAR/DOSCAR readers.

Reference: Python's ``float()`` (correctly rounded decimal → binary64, Python
language reference, "Floating-point literals"/``float``): every value the
decoder returns must equal it bit for bit, sign of zero included. Blocks
outside its layout must be left to the general parser (None), so what the
readers accept and every error message stay as before.
"""

from __future__ import annotations

import numpy as np
import pytest

from orbtool.io._numbers import fixed_columns, floats


def _reference(rows):
    return np.array([float(t) for r in rows for t in r.split()])


@pytest.mark.parametrize("fmt", ["%10.3f" + " %11.4E" * 9, "%3d" + " %7.3f" * 10, "%15.7e %20.12E", "%9.1f %6d"])
def test_equals_python_float_bit_for_bit(fmt):
    rng = np.random.default_rng(7)
    n = 500
    ncol = fmt.count("%")
    cols = []
    for spec in fmt.split("%")[1:]:
        if spec.endswith("d"):
            cols.append(rng.integers(-99, 999, n))
        elif spec.endswith(("E", "e")):  # magnitudes from 1e-60 to 1e60: beyond the exact powers of ten too
            cols.append(rng.standard_normal(n) * 10.0 ** rng.integers(-60, 60, n))
        else:
            cols.append(rng.uniform(-99, 99, n))
    rows = [fmt % tuple(c[i] for c in cols) for i in range(n)]
    rows = [r for r in rows if len(r) == len(rows[0])]
    got = fixed_columns(rows)
    assert got is not None and got.size == len(rows) * ncol
    ref = _reference(rows)
    assert np.array_equal(got, ref)
    assert np.array_equal(np.signbit(got), np.signbit(ref))  # "-0.000" stays negative zero


def test_negative_zero_and_plus_signs():
    rows = ["  -0.000  +1.500  0.0000E+00 -0.0000E+00"] * 70
    got = fixed_columns(rows)
    assert np.array_equal(np.signbit(got), np.signbit(_reference(rows)))
    assert np.array_equal(got, _reference(rows))


@pytest.mark.parametrize("bad", [
    "  1.0D+01  2.000",     # Fortran D exponent: the general path decides
    "      nan  2.000",     # not a number
    "  1.5-100  2.000",     # exponent without a letter
    "  1.0E+01  2.0\t0",    # a tab
    "  1.0E+01  2-000",     # a sign inside the digits
])
def test_outside_the_layout_is_left_to_the_general_parser(bad):
    good = "  1.0E+01  2.000"
    rows = [good] * 80 + [bad]
    assert fixed_columns(rows) is None


def test_ragged_or_misaligned_blocks_are_left_alone():
    assert fixed_columns(["  1.00  2.0"] * 80 + [" 1.000  2.0"]) is None  # dot moved
    assert fixed_columns(["  1.00  2.0"] * 80 + ["  1.00  2.00"]) is None  # longer line


def test_errors_unchanged_through_floats():
    # the first bad token is still named with its line, as before the fast path existed
    rows = ["    1  0.100  0.200"] * 100
    rows[57] = "    1  0.100  0.2x0"
    from orbtool.errors import InputFormatError
    with pytest.raises(InputFormatError, match=r"'0.2x0'") as err:
        floats(rows, "PROCAR", 10, "ion tables")
    assert err.value.line == 67
