"""A tiny synthetic tube renderer for the measure tests (invented scenes, not a studio).

Physics kept deliberately simple so the expected answer is known exactly:
linear-light compositing, Beer–Lambert absorption along the chord
2·sqrt(r² − d²) (geometry), a scattered-back veil R_p·(1 − exp(−σ·L)) and
transmission exp(−(α + σ)·L) (single-layer two-flux simplification, chosen for
the tests), opaque settled solid, darker glass rims, a meniscus line and an
optional specular streak. Output is sRGB-encoded uint8 (IEC 61966-2-1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tubevision.colorimetry import linear_to_srgb
from tubevision.tubes import TubeRegion


@dataclass(frozen=True)
class SynthTube:
    absorb: tuple[float, float, float] = (0.0, 0.0, 0.0)   # α per channel, 1/px of chord
    scatter: float = 0.0                                   # σ, 1/px of chord
    pellet_px: float = 0.0                                 # settled solid height (px)
    pellet_rgb: tuple[float, float, float] = (0.85, 0.85, 0.85)  # linear reflectance
    empty: bool = False
    streak: bool = True
    lens_bottom: float = 0.0        # round-bottom vertical lens: backdrop row seen = centre − m·(row − centre)


def render(tubes, *, width=60, height=400, gap=40, banded=True, band_px=16, seed=0, noise=0.004,
           top_margin=30, fill_frac=0.7, backdrop_rgb=(0.85, 0.85, 0.85), dark_rgb=(0.04, 0.04, 0.04),
           rack_rows=None, rack_value=0.06):
    """Render a row of tubes; returns (uint8 image, list of TubeRegion).

    ``rack_rows`` (row0, row1) draws a bar in front of everything, of linear level
    ``rack_value`` (dark by default; a white rack is ~0.8)."""
    rng = np.random.default_rng(seed)   # seed fixes the sensor noise
    n = len(tubes)
    W = gap + n * (width + gap)
    H = height + 2 * top_margin
    rows = np.arange(H)
    dark = ((rows // band_px) % 2 == 1) if banded else np.zeros(H, bool)
    back = np.where(dark[:, None], np.asarray(dark_rgb), np.asarray(backdrop_rgb))  # (H, 3)
    img = np.broadcast_to(back[:, None, :], (H, W, 3)).copy()
    regions = []
    r_out = width / 2.0
    wall = max(2, int(round(width * 0.06)))
    r_in = r_out - wall
    for i, t in enumerate(tubes):
        x0 = gap + i * (width + gap)
        x1 = x0 + width
        y0 = top_margin
        y1 = y0 + height
        cx = x0 + (width - 1) / 2.0
        cols = np.arange(x0, x1)
        d = cols - cx
        chord = 2 * np.sqrt(np.clip(r_in ** 2 - d ** 2, 0, None))      # (width,)
        inner = np.abs(d) < r_in
        # bottom: hemisphere of inner radius r_in centred at row (inner_bottom - r_in)
        inner_bottom = y1 - 1 - wall
        centre_row = inner_bottom - r_in
        liquid_top = None if t.empty else int(round(y0 + (1 - fill_frac) * height))
        a = np.asarray(t.absorb, float)
        for row in range(y0, y1):
            line = img[row, x0:x1]
            # inside extent on this row (round bottom)
            if row > centre_row:
                half = np.sqrt(max(r_in ** 2 - (row - centre_row) ** 2, 0.0))
                ins = np.abs(d) < half
                ch = 2 * np.sqrt(np.clip(half ** 2 - d ** 2, 0, None))
            else:
                ins = inner
                ch = chord
            has_liquid = (liquid_top is not None) and row >= liquid_top
            seen = back[row]
            if t.lens_bottom and row > centre_row:
                # the filled hemisphere is a ball lens: it shows an inverted, magnified strip of
                # the backdrop (a real round bottom does; the studio does not model it)
                src = int(round(centre_row - t.lens_bottom * (row - centre_row)))
                seen = back[min(max(src, 0), H - 1)]
                if has_liquid:
                    line[ins] = seen[None, :]
            if has_liquid:
                L = ch[:, None]
                T = np.exp(-(a[None, :] + t.scatter) * L)
                S = 0.9 * (1 - np.exp(-t.scatter * L))
                val = seen[None, :] * T + S
                line[ins] = val[ins]
            line[ins] *= 0.97          # glass transmission, both walls
            rim = ~ins
            line[rim] = line[rim] * 0.45 + 0.02
            if t.pellet_px > 0 and row >= inner_bottom + 1 - t.pellet_px and row <= inner_bottom:
                line[ins] = np.asarray(t.pellet_rgb)[None, :] * 0.97
            if liquid_top is not None and liquid_top - 2 <= row < liquid_top:
                line[ins] *= 0.35      # meniscus line
            if t.streak and row < inner_bottom - r_in:
                s0 = int(round(cx - 0.3 * r_in))
                line[s0 - x0:s0 - x0 + 2] = 1.2
            img[row, x0:x1] = line
        margin = int(round(width / 3))
        regions.append(TubeRegion(index=i, row=0, bbox=(x0, y0, x1, y1), axis_col=cx,
                                  inner_col0=x0 + margin, inner_col1=x1 - margin,
                                  liquid_top=liquid_top, liquid_bottom=int(round(centre_row)),
                                  bottom_top=int(round(centre_row)), inner_bottom=inner_bottom,
                                  source="layout"))
    if rack_rows is not None:
        img[rack_rows[0]:rack_rows[1]] = rack_value
    img = img + rng.normal(0, noise, img.shape)
    enc = linear_to_srgb(np.clip(img, 0, 1))
    return np.round(enc * 255).astype(np.uint8), regions
