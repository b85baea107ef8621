"""The printable backdrop that the measure stage reads turbidity from.

The backdrop is white paper with black horizontal bands of equal width.
Bands run horizontally on purpose: an upright tube is a cylinder whose axis
is vertical, so it refracts the backdrop only across its width (it acts as a
cylindrical lens, magnifying and mirroring left-right), while each row of the
backdrop stays at its own height behind the tube. A row-wise light/dark
pattern therefore lines up through the tube with the same pattern seen
beside it, and :mod:`tubevision.measure` compares the two row by row.

Band width: :data:`BAND_WIDTH_MM` = 4 mm. A liquid column in a 16 mm tube
filled 40 mm high then spans about five light and five dark bands, and a
band is still ≥ 20 px high on a 12 MP photo of a 24-tube rack (≈ 8 px/mm),
so the rows near each band edge (blurred by the lens and the JPEG codec) can
be left out and enough rows remain in each band.
"""

from __future__ import annotations

import numpy as np

from .errors import TubevisionInputError

__all__ = ["BAND_WIDTH_MM", "LIGHT_SRGB8", "DARK_SRGB8", "render_backdrop", "write_backdrop"]

BAND_WIDTH_MM = 4.0
"""Width of each light and each dark band (mm); the pattern's period is twice this.
Chosen for the reasons in the module docstring."""

LIGHT_SRGB8 = 255
"""sRGB code of the light bands: unprinted paper (no ink)."""

DARK_SRGB8 = 0
"""sRGB code of the dark bands: full black ink (printed black reflects ~4 %, from memory),
which gives the largest band contrast for the turbidity reading."""

MAX_BACKDROP_PIXELS = 200_000_000
"""Refuse to render more than this many pixels (a 1.2 m × 0.9 m sheet at 300 dpi is ~150 MP)."""


def render_backdrop(width_mm: float, height_mm: float, dpi: float, *,
                    band_mm: float = BAND_WIDTH_MM) -> np.ndarray:
    """Render the banded backdrop as an sRGB image for printing at ``dpi``.

    Parameters
    ----------
    width_mm, height_mm : float
        Printed size of the sheet (mm), > 0.
    dpi : float
        Print resolution (dots per inch, 25.4 mm), 20 … 1200.
    band_mm : float, keyword-only
        Width of each light and each dark band (mm); at least 1 mm and two
        printed dots.

    Returns
    -------
    ndarray of shape (H, W, 3), uint8
        sRGB-encoded; starts with a light band at the top edge; H and W are
        the sheet size in dots, rounded.

    Raises
    ------
    TubevisionInputError
        Sizes or resolution out of range.

    Examples
    --------
    >>> img = render_backdrop(20, 16, 25.4)   # 1 dot per mm
    >>> img.shape, int(img[0, 0, 0]), int(img[5, 0, 0])
    ((16, 20, 3), 255, 0)
    """
    if not (np.isfinite(width_mm) and np.isfinite(height_mm) and width_mm > 0 and height_mm > 0):
        raise TubevisionInputError(f"backdrop size must be positive mm, got {width_mm} x {height_mm}")
    if not (np.isfinite(dpi) and 20 <= dpi <= 1200):
        raise TubevisionInputError(f"backdrop dpi must be between 20 and 1200, got {dpi}")
    dots_per_mm = dpi / 25.4
    if not (np.isfinite(band_mm) and band_mm >= 1.0 and band_mm * dots_per_mm >= 2.0):
        raise TubevisionInputError(f"band width must be at least 1 mm and two printed dots, got {band_mm} mm")
    h = int(round(height_mm * dots_per_mm))
    w = int(round(width_mm * dots_per_mm))
    if h * w > MAX_BACKDROP_PIXELS:
        raise TubevisionInputError(f"backdrop of {w}x{h} dots is too large; lower --dpi")
    rows_mm = (np.arange(h) + 0.5) / dots_per_mm
    dark = (np.floor(rows_mm / band_mm).astype(np.int64) % 2) == 1
    column = np.where(dark, DARK_SRGB8, LIGHT_SRGB8).astype(np.uint8)
    return np.ascontiguousarray(np.broadcast_to(column[:, None, None], (h, w, 3)))


def write_backdrop(path, width_mm: float, height_mm: float, dpi: float, *, overwrite: bool = False):
    """Write the banded backdrop to ``path`` (``.png`` or ``.pdf``) at its true size.

    Raises
    ------
    TubevisionInputError
        Sizes or resolution out of range (:func:`render_backdrop`), another extension, or
        a file that exists and ``overwrite`` is False.
    """
    from .record.write import write_print_image

    return write_print_image(path, render_backdrop(width_mm, height_mm, dpi), dpi,
                             title="tubevision banded backdrop", overwrite=overwrite)
