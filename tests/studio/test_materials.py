"""Tube contents optics: Beer-Lambert and Kubelka-Munk.

Kinds: (1) published laws and limiting cases; (2) known-answer checks of the library.
"""

import numpy as np
import pytest

from tubevision.errors import TubevisionInputError
from tubevision.studio import materials as mat


def test_absorbance_doubles_with_path_length():
    """Kind 1: Beer-Lambert law (IUPAC Gold Book, DOI 10.1351/goldbook.B00626): A = ε c l,
    so the absorbance of a clear solution doubles when the path doubles."""
    c = mat.contents("yellow-solution")
    t, veil = mat.liquid_optics(c, inner_diameter_mm=14.4, path_mm=np.array([3.0, 6.0]))
    a = -np.log10(t)
    np.testing.assert_allclose(a[1], 2 * a[0], rtol=1e-12, atol=1e-12)  # float rounding of 10^-x
    assert np.all(veil == 0)
    # and the yellow band absorbs in the blue, not the red (chromate-like band 370-450 nm)
    lam = mat.WAVELENGTHS_NM
    assert a[0][lam == 420][0] > 10 * a[0][lam == 600][0]


def test_km_limits():
    """Kind 1: Kubelka (1948), JOSA 38(5) 448: with K = 0, R = SX / (1 + SX); for a thick slab
    R → R∞ = 1 + K/S - sqrt((K/S)² + 2 K/S) (Kubelka-Munk 1931)."""
    sx = np.array([0.1, 1.0, 5.0])
    np.testing.assert_allclose(mat.km_slab_reflectance(0.0, 1.0, sx), sx / (1 + sx), rtol=1e-9)
    k, s = 0.2, 1.0
    r_inf = 1 + k / s - np.sqrt((k / s) ** 2 + 2 * k / s)
    assert float(mat.km_slab_reflectance(k, s, 200.0)) == pytest.approx(r_inf, rel=1e-9)
    assert float(mat.km_slab_reflectance(0.5, 0.0, 3.0)) == 0.0


def test_turbidity_raises_veil_and_dims_transmission():
    """Kind 2: more suspended solid → less direct transmission and more veil, monotonically."""
    c = mat.contents("white-cloud")
    vt, vr = [], []
    for tau in (0.0, 0.5, 2.0, 8.0):
        t, r = mat.liquid_optics(c, turbidity=tau, inner_diameter_mm=14.4, path_mm=np.array([14.4]))
        vt.append(t[0, 40])
        vr.append(r[0, 40])
    assert all(np.diff(vt) < 0) and all(np.diff(vr) > 0)


def test_every_library_entry_is_consistent():
    """Kind 2: every contents entry names known solutes/solids and contract colour words."""
    words = {"colourless", "white", "grey", "black", "yellow", "orange", "red", "pink", "brown",
             "violet", "blue", "green"}
    for c in mat.CONTENTS.values():
        if c.solute:
            assert c.solute in mat.SOLUTES
        if c.solid:
            r = mat.solid_reflectance(c.solid)
            assert r.min() > 0 and r.max() < 1
        assert c.empty or c.liquid_colour_name in words
        assert (c.pellet_mm > 0) == (c.pellet_colour_name is not None)
        if c.pellet_colour_name:
            assert c.pellet_colour_name in words - {"colourless"}
        if c.turbidity > 0:   # contract: colourless is for a clear liquid; a solid is never colourless
            assert c.liquid_colour_name != "colourless", c.key


def test_unknown_contents_message():
    with pytest.raises(TubevisionInputError, match="unknown tube contents 'lemonade'"):
        mat.contents("lemonade")
