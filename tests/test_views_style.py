"""orbtool's visual language is colour-blind safe and readable.

References
----------
* CVD simulation: G. M. Machado, M. M. Oliveira & L. A. F. Fernandes, "A physiologically-based model for
  simulation of color vision deficiency", IEEE TVCG 15, 1291 (2009), as implemented by the colorspacious
  library (``sRGB1+CVD`` space, severity 100 = dichromacy).
* Colour differences in CAM02-UCS: M. R. Luo, G. Cui & C. Li, Color Res. Appl. 31, 320 (2006)
  (colorspacious ``deltaE``).
* Contrast ratio: W3C WCAG 2.1, definitions "relative luminance" and "contrast ratio", success criterion
  1.4.6 (enhanced contrast ≥ 7:1).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from orbtool import style

colorspacious = pytest.importorskip("colorspacious")

CONDITIONS = (None, "deuteranomaly", "protanomaly", "tritanomaly")


def _rgb(h: str) -> np.ndarray:
    return np.array([int(h[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0


def _seen(h: str, cvd):
    c = _rgb(h)
    if cvd is None:
        return c
    space = {"name": "sRGB1+CVD", "cvd_type": cvd, "severity": 100}
    return np.clip(colorspacious.cspace_convert(c, space, "sRGB1"), 0, 1)


def _de(a: str, b: str, cvd) -> float:
    return float(colorspacious.deltaE(_seen(a, cvd), _seen(b, cvd), input_space="sRGB1"))


@pytest.mark.parametrize("cvd", CONDITIONS)
def test_categorical_colours_stay_apart(cvd):
    # ΔE(CAM02-UCS) ≥ 15 between every pair — "clearly different at a glance" is common practice for
    # categorical palettes; the simulation is Machado et al. 2009 (see module docstring)
    worst = min(_de(a, b, cvd) for a, b in itertools.combinations(style.CATEGORICAL, 2))
    assert worst >= 15.0, f"{cvd}: closest categorical pair only ΔE = {worst:.1f}"


@pytest.mark.parametrize("cvd", CONDITIONS)
def test_meaningful_pairs_stay_apart(cvd):
    # band tints: ≥ 12 (they are pale fills, also separated by position); level vs fills ≥ 40;
    # the two lobes ≥ 40; shells ≥ 15 — thresholds are common practice, simulation as above
    assert _de(style.VALENCE, style.CONDUCTION, cvd) >= 12
    for fill in (style.VALENCE, style.CONDUCTION, style.GAP):
        assert _de(style.LEVEL, fill, cvd) >= 40
    assert _de(style.LOBE_POSITIVE, style.LOBE_NEGATIVE, cvd) >= 40
    for a, b in ((1, 2), (2, "rest"), (1, "rest")):
        assert _de(style.SHELL_COLOURS[a], style.SHELL_COLOURS[b], cvd) >= 15


def _luminance(h: str) -> float:
    # WCAG 2.1 relative luminance: linearise sRGB (threshold 0.04045 as in IEC 61966-2-1), weights 0.2126/0.7152/0.0722
    c = _rgb(h)
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(lin @ [0.2126, 0.7152, 0.0722])


def _contrast(a: str, b: str) -> float:
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_wcag_luminance_matches_reference_points():
    # WCAG 2.1 worked values: white/black contrast is 21:1; #777777 on white is 4.48:1 (from memory)
    assert _contrast("#ffffff", "#000000") == pytest.approx(21.0)
    assert _contrast("#777777", "#ffffff") == pytest.approx(4.48, abs=0.01)


def test_text_contrast_is_enhanced():
    # WCAG 2.1 SC 1.4.6: ≥ 7:1 for text; labels sit on the paper and on both band tints
    for bg in (style.PAPER, style.VALENCE, style.CONDUCTION):
        assert _contrast(style.INK, bg) >= 7.0
    assert _contrast(style.LEVEL, style.PAPER) >= 7.0


def test_glyphs_follow_vacancy_type_and_differ():
    assert style.glyph_for("V_anion") == "triangle"
    assert style.glyph_for("V_cation") == "square"
    assert style.glyph_for("V_Si") == "diamond"
    assert style.glyph_for("V_cation", library="matplotlib") == "s"
    assert len(set(style.VACANCY_GLYPHS.values())) == len(style.VACANCY_GLYPHS)


def test_matplotlib_rc_is_accepted_and_shared():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    with style.use_matplotlib():
        fig, ax = plt.subplots()
        (line,) = ax.plot([0, 1], [0, 1])
        assert matplotlib.colors.to_hex(line.get_color()) == style.CATEGORICAL[0]
        assert matplotlib.colors.to_hex(ax.get_facecolor()) == style.PAPER
        plt.close(fig)
    assert style.mpl_dash("host") == "--"
