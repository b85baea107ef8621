"""Colour words against published colour-naming references (test kind 1) and edge cases.

References
----------
.. [1] S. M. Newhall, D. Nickerson, D. B. Judd, "Final report of the O.S.A.
   subcommittee on the spacing of the Munsell colors", JOSA 33(7), 385-418,
   1943 (the Munsell renotation data, xyY under CIE illuminant C, as shipped by
   colour-science 0.4 in ``colour.notation.datasets.munsell.MUNSELL_COLOURS_REAL``).
.. [2] ASTM D1535-08, Standard Practice for Specifying Color by the Munsell
   System (value-to-luminance polynomial, used for the neutrals N 1 ... N 9.5,
   which the renotation table does not list; ``colour.colorimetry.luminance_ASTMD1535``).
.. [3] K. L. Kelly, D. B. Judd, Color: Universal Language and Dictionary of
   Names, NBS Special Publication 440, 1976 (the ISCC-NBS names that the
   mapping below follows, from memory).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from tubevision.classify.naming import (
    COLOUR_NAME_TABLE,
    COLOUR_WORDS,
    colour_name,
    colour_name_candidates,
    colour_names,
)
from tubevision.colorimetry import WHITE_D65, adapt_bradford, xyz_to_lab
from tubevision.errors import TubevisionInputError

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import colour  # test-only oracle
    from colour.notation.datasets.munsell import MUNSELL_COLOURS_REAL

WHITE_C = colour.xy_to_XYZ(colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["C"])


def _munsell_lab_d65(xyY: np.ndarray) -> np.ndarray:
    """Renotation xyY (Y in %, illuminant C) to CIELAB D65: Bradford C→D65 (Lam 1985)."""
    xyz = colour.xyY_to_XYZ(np.asarray(xyY, dtype=float) * [1.0, 1.0, 0.01])
    return xyz_to_lab(adapt_bradford(xyz, WHITE_C, WHITE_D65))


# Munsell hue steps in order around the circle (40 steps of 2.5).
_HUES = [f"{n}{f}" for f in ("R", "YR", "Y", "GY", "G", "BG", "B", "PB", "P", "RP")
         for n in ("2.5", "5", "7.5", "10")]


def _between(hue: str, first: str, last: str) -> bool:
    i, a, b = _HUES.index(hue), _HUES.index(first), _HUES.index(last)
    return a <= i <= b if a <= b else (i >= a or i <= b)


def expected_word(hue: str, value: float, chroma: float) -> str | None:
    """The word a chemist would write for a Munsell chip, or None where it is not clear-cut.

    Only chips far inside one ISCC-NBS name block [3]_ are mapped; hue families
    that straddle two of our words (10R, 10YR, 2.5GY, 10GY-10BG, 7.5PB, 10P-2.5RP)
    and low chromas are left out on purpose.
    """
    if chroma < 6:  # below Munsell chroma 6 many blocks are "greyish"/"pale": leave out
        if _between(hue, "2.5YR", "7.5YR") and 2 <= value <= 4 and chroma >= 4:
            return "brown"  # 5YR 3/4: ISCC-NBS moderate brown
        return None
    if _between(hue, "2.5R", "7.5R") or hue == "10RP":
        if 3 <= value <= 5 and chroma >= 10:
            return "red"  # 5R 4/12: strong red
        if value >= 7 and chroma <= 10:
            return "pink"  # 5R 8/6: moderate pink
        return None
    if hue == "5RP" and value >= 7 and chroma <= 8:
        return "pink"  # 5RP 7/6: light purplish pink
    if _between(hue, "2.5YR", "7.5YR"):
        if value >= 6 and chroma >= 8:
            return "orange"  # 5YR 7/12: strong orange
        if 2 <= value <= 4 and chroma <= 6:
            return "brown"  # 5YR 3/6: strong brown
        return None
    if _between(hue, "2.5Y", "10Y") and value >= 7:
        return "yellow"  # 5Y 8/10: strong yellow
    if _between(hue, "5GY", "5BG") and 3 <= value <= 8:
        return "green"  # 5G 5/8: strong green
    if _between(hue, "2.5B", "5PB") and 3 <= value <= 8:
        return "blue"  # 5PB 4/10: strong blue
    if _between(hue, "10PB", "7.5P") and 2 <= value <= 7:
        return "violet"  # 5P 4/10: strong violet/purple
    return None


def _munsell_cases():
    cases = []
    for (hue, value, chroma), xyY in MUNSELL_COLOURS_REAL:
        word = expected_word(hue, value, chroma)
        if word is not None:
            cases.append((f"{hue} {value:g}/{chroma:g}", word, _munsell_lab_d65(xyY)))
    return cases


MUNSELL_CASES = _munsell_cases()


def test_munsell_renotation_chromatic_names():
    """Published values (kind 1): Munsell renotation chips [1]_ that are clearly one word.

    Every mapped chip must get its word, or — where it lies within a JND or two of
    a table boundary — list it among :func:`colour_name_candidates`. At least 95 %
    must get it outright (the table's boundaries were placed between hue families,
    so only chips whose hue drifts with value and chroma should need the allowance).
    """
    assert len(MUNSELL_CASES) > 600  # the mapping covers a real share of the 2734 chips
    for solid in (False, True):
        labs = np.array([c[2] for c in MUNSELL_CASES])
        got = colour_names(labs, solid=solid)
        exact = 0
        misses = []
        for (chip, want, lab), word in zip(MUNSELL_CASES, got):
            if word == want:
                exact += 1
                continue
            cands = [w for w, s in colour_name_candidates(lab, solid=solid)]
            if want not in cands:
                misses.append((chip, want, word, cands))
        assert not misses, misses[:10]
        assert exact / len(MUNSELL_CASES) >= 0.95, exact / len(MUNSELL_CASES)


@pytest.mark.parametrize(
    ("chip", "word"),
    [("5Y 8/10", "yellow"), ("5PB 4/10", "blue"), ("5R 4/12", "red"), ("5YR 3/4", "brown"),
     ("5RP 7/6", "pink"), ("5G 5/8", "green"), ("5P 4/10", "violet"), ("5YR 7/12", "orange")],
)
def test_munsell_named_examples(chip, word):
    """Published values (kind 1): the brief's example chips by name, outright."""
    hue, vc = chip.split()
    value, chroma = (float(v) for v in vc.split("/"))
    xyY = dict(MUNSELL_COLOURS_REAL)[(hue, value, chroma)]
    assert colour_name(_munsell_lab_d65(xyY), solid=True) == word
    assert colour_name(_munsell_lab_d65(xyY)) == word


@pytest.mark.parametrize(
    ("value", "solid_word", "liquid_word"),
    [(9.5, "white", "colourless"), (9.0, "white", "colourless"), (7.0, "grey", "colourless"),
     (5.0, "grey", "grey"), (3.5, "grey", "grey"), (2.0, "black", "black"), (1.0, "black", "black")],
)
def test_munsell_neutrals(value, solid_word, liquid_word):
    """Published values (kind 1): neutrals N v, Y from ASTM D1535 [2]_, chromaticity of C.

    ISCC-NBS [3]_ calls N 9.5 white, N 2 black and N 3.5-7 grey; a liquid with no
    hue is colourless when light, and a solid is never colourless.
    """
    Y = float(colour.colorimetry.luminance_ASTMD1535(value)) / 100.0  # noqa: N806
    xyz = WHITE_C * Y
    lab = xyz_to_lab(adapt_bradford(xyz, WHITE_C, WHITE_D65))
    assert abs(lab[1]) < 1e-6 and abs(lab[2]) < 1e-6  # Bradford maps white C onto the D65 axis
    assert colour_name(lab, solid=True) == solid_word
    assert colour_name(lab) == liquid_word


@pytest.mark.parametrize(("value", "word"), [(1.0, "black"), (2.0, "black"), (2.4, "black"),
                                             (3.7, "grey"), (5.0, "grey")])
def test_neutral_solid_seen_through_glass(value, word):
    """Published values (kind 1): a neutral chip (Y by ASTM D1535 [2]_) behind one glass
    wall, whose Fresnel reflectance ((n-1)/(n+1))² = 0.04 for n = 1.5 (Hecht, Optics,
    §4.6.2) adds to Y: ISCC-NBS [3]_ black chips (value < 2.5) stay black, greys stay grey."""
    n = 1.5
    veil = ((n - 1.0) / (n + 1.0)) ** 2
    Y = float(colour.colorimetry.luminance_ASTMD1535(value)) / 100.0 + veil  # noqa: N806
    lab = xyz_to_lab(adapt_bradford(WHITE_C * Y, WHITE_C, WHITE_D65))
    assert colour_name(lab, solid=True) == word


def test_table_covers_every_colour_and_solids_never_colourless():
    """Edge: the table tiles Lab for both phases; only liquids can be colourless."""
    rng = np.random.default_rng(7)  # seed 7: any seed works, the tiling is exact
    labs = np.column_stack([rng.uniform(0, 100, 20000), rng.uniform(-130, 130, 20000),
                            rng.uniform(-130, 130, 20000)])
    for solid in (False, True):
        words = colour_names(labs, solid=solid)
        assert set(words) <= set(COLOUR_WORDS)
        assert ("colourless" in set(words)) is (not solid)
    assert {r.word for r in COLOUR_NAME_TABLE} == set(COLOUR_WORDS)
    assert all(r.reason for r in COLOUR_NAME_TABLE)


def test_candidates_list_neighbours_at_a_boundary_only():
    """Synthetic (kind 2): on the orange/yellow hue boundary both words are listed; far inside, one."""
    h = np.radians(78.0)
    border = [80.0, 60 * np.cos(h), 60 * np.sin(h)]
    words = [w for w, _ in colour_name_candidates(border)]
    assert words[:2] in (["orange", "yellow"], ["yellow", "orange"])
    inside = colour_name_candidates([90.0, -5.0, 70.0])
    assert inside == [("yellow", 1.0)]
    # measurement uncertainty widens the spread
    wide = colour_name_candidates([90.0, -5.0, 70.0], lab_sd=[2.0, 15.0, 15.0])
    assert len(wide) > 1 and wide[0][0] == "yellow"
    scores = [s for _, s in colour_name_candidates(border)]
    assert 0.98 <= sum(scores) <= 1.0 + 1e-9


def test_bad_input():
    with pytest.raises(TubevisionInputError, match="shape"):
        colour_name([1.0, 2.0])
    with pytest.raises(TubevisionInputError, match="finite"):
        colour_name([np.nan, 0.0, 0.0])
    with pytest.raises(TubevisionInputError, match="lab_sd"):
        colour_name_candidates([50.0, 0.0, 0.0], lab_sd=[-1.0, 0.0, 0.0])
