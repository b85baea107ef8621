"""Tests of tubevision.backdrop. Kinds as in test_measure.py."""

from __future__ import annotations

import numpy as np
import pytest

from tubevision.backdrop import BAND_WIDTH_MM, render_backdrop
from tubevision.errors import TubevisionInputError


def test_bands_have_the_stated_width():
    """[synthetic] At 254 dpi (10 dots/mm) each 4 mm band is 40 rows; light first; the
    sheet is the stated size in dots."""
    img = render_backdrop(100, 60, 254)
    assert img.shape == (600, 1000, 3) and img.dtype == np.uint8
    col = img[:, 0, 0]
    edges = np.flatnonzero(np.diff(col.astype(int))) + 1
    assert np.all(np.diff(edges) == round(BAND_WIDTH_MM * 10))
    assert col[0] == 255 and col[40] == 0
    assert np.all(img == img[:, :1])          # horizontal bands: every column the same


def test_measure_reads_the_printed_bands_as_banded():
    """[synthetic] A tube photographed on the printed pattern is measured with the band
    method (the light/dark rows are found beside the tube)."""
    from tubevision.image import to_linear
    from tubevision.measure import measure_tube
    from tubevision.tubes import TubeRegion

    sheet = render_backdrop(40, 60, 127)       # 5 dots/mm, bands 20 rows
    img = sheet[:, :200].copy()
    lin = to_linear(img)
    lin[:, 80:120] *= 0.9                      # a clear tube: slightly dimmer, same pattern
    img = np.round(np.where(lin > 0.0031308, 1.055 * lin ** (1 / 2.4) - 0.055, 12.92 * lin) * 255).astype(np.uint8)
    region = TubeRegion(index=0, row=0, bbox=(80, 10, 120, 290), axis_col=99.5, inner_col0=93,
                        inner_col1=107, liquid_top=40, liquid_bottom=260, bottom_top=260, inner_bottom=288)
    m = measure_tube(img, region, correction=None, mm_per_px=0.2)
    assert m.liquid.turbidity_method == "band-contrast"
    assert m.liquid.turbidity < 0.02


def test_bad_sizes():
    """Non-positive sizes and silly resolutions raise one-line input errors."""
    with pytest.raises(TubevisionInputError, match="positive"):
        render_backdrop(0, 10, 300)
    with pytest.raises(TubevisionInputError, match="dpi"):
        render_backdrop(10, 10, 5000)
    with pytest.raises(TubevisionInputError, match="band width"):
        render_backdrop(10, 10, 300, band_mm=0.1)
