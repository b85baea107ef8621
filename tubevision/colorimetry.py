"""Colour maths with tubevision's conventions fixed.

Every other stage converts colour through these wrappers, so that one place
states the conventions and cites the sources:

* sRGB-encoded values and linear light are both floats in [0, 1], channels
  on the last axis, RGB order.
* CIE XYZ is scaled so that the reference white has Y = 1.
* CIELAB arrays are ``(..., 3)`` with L* in [0, 100].
* The contract's colour space is CIELAB under D65 with the CIE 1931 2°
  observer. The card's measured values are D50 (ISO 13655); they reach D65
  through :func:`adapt_bradford`, the one named adaptation step.

References
----------
.. [1] IEC 61966-2-1:1999, Multimedia systems and equipment - Colour
   measurement and management - Part 2-1: Default RGB colour space - sRGB.
.. [2] CIE 015:2018, Colorimetry, 4th edition. CIE, Vienna.
   DOI 10.25039/TR.015.2018.
.. [3] G. Sharma, W. Wu, E. N. Dalal, "The CIEDE2000 color-difference
   formula: implementation notes, supplementary test data, and mathematical
   observations", Color Research & Application 30(1), 21-30, 2005.
   DOI 10.1002/col.20070.
.. [4] K. M. Lam, "Metamerism and colour constancy", PhD thesis, University
   of Bradford, 1985; matrix as given in ICC.1:2022 Annex E (linearised
   Bradford transform).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

__all__ = [
    "WHITE_D65",
    "WHITE_D50",
    "M_SRGB_TO_XYZ",
    "M_XYZ_TO_SRGB",
    "srgb_to_linear",
    "linear_to_srgb",
    "linear_srgb_to_xyz",
    "xyz_to_linear_srgb",
    "xyz_to_lab",
    "lab_to_xyz",
    "srgb_to_lab",
    "lab_to_srgb",
    "lab_to_lch",
    "delta_e00",
    "adapt_bradford",
]

WHITE_D65 = np.array([0.95047, 1.0, 1.08883])
"""CIE XYZ of D65, 2° observer, Y = 1. The four-decimal values used by
IEC 61966-2-1 [1]_ and CIE 015:2018 Table 5 [2]_ (x = 0.3127, y = 0.3290
rounded)."""

WHITE_D50 = np.array([0.96422, 1.0, 0.82521])
"""CIE XYZ of D50, 2° observer, Y = 1, as ICC.1:2022 and ISO 13655 use it."""

M_SRGB_TO_XYZ = np.array(
    [
        [0.4124, 0.3576, 0.1805],
        [0.2126, 0.7152, 0.0722],
        [0.0193, 0.1192, 0.9505],
    ]
)
"""Linear sRGB to CIE XYZ (D65), IEC 61966-2-1:1999 [1]_ equation 6."""

M_XYZ_TO_SRGB = np.linalg.inv(M_SRGB_TO_XYZ)
"""Inverse of :data:`M_SRGB_TO_XYZ` (the standard prints a rounded inverse)."""

M_BRADFORD = np.array(
    [
        [0.8951, 0.2664, -0.1614],
        [-0.7502, 1.7135, 0.0367],
        [0.0389, -0.0685, 1.0296],
    ]
)
"""Bradford cone-response matrix, Lam (1985) [4]_, as in ICC.1:2022 Annex E."""

_EPSILON = float(Fraction(216, 24389))
"""CIE 015:2018 [2]_ eq. 8.3: (6/29)^3, the linear-segment threshold."""
_KAPPA = float(Fraction(24389, 27))
"""CIE 015:2018 [2]_: (29/3)^3, slope of the linear segment of L*."""


def srgb_to_linear(v: np.ndarray) -> np.ndarray:
    """Decode sRGB-encoded values to linear light.

    Parameters
    ----------
    v : ndarray, any shape — sRGB-encoded, in [0, 1].

    Returns
    -------
    ndarray of the same shape, float32 for float32 input else float64 — linear.

    References
    ----------
    IEC 61966-2-1:1999 [1]_, equation 5 (threshold 0.04045, exponent 2.4).

    Examples
    --------
    >>> float(srgb_to_linear(np.array(0.5)))  # doctest: +ELLIPSIS
    0.2140...
    """
    v = np.asarray(v)
    if v.dtype != np.float32:
        v = v.astype(np.float64)
    low = v / 12.92
    high = ((np.maximum(v, 0.04045) + 0.055) / 1.055) ** 2.4
    return np.where(v <= 0.04045, low, high).astype(v.dtype, copy=False)


def linear_to_srgb(v: np.ndarray) -> np.ndarray:
    """Encode linear light as sRGB (inverse of :func:`srgb_to_linear`).

    References
    ----------
    IEC 61966-2-1:1999 [1]_, equation 7 (threshold 0.0031308).

    Examples
    --------
    >>> round(float(linear_to_srgb(np.array(0.2140))), 4)
    0.5
    """
    v = np.asarray(v)
    if v.dtype != np.float32:
        v = v.astype(np.float64)
    low = v * 12.92
    high = 1.055 * np.maximum(v, 0.0031308) ** (1 / 2.4) - 0.055
    return np.where(v <= 0.0031308, low, high).astype(v.dtype, copy=False)


def linear_srgb_to_xyz(rgb: np.ndarray) -> np.ndarray:
    """Linear sRGB ``(..., 3)`` to CIE XYZ (D65, Y of white = 1), IEC 61966-2-1 eq. 6."""
    return np.asarray(rgb, dtype=np.float64) @ M_SRGB_TO_XYZ.T


def xyz_to_linear_srgb(xyz: np.ndarray) -> np.ndarray:
    """CIE XYZ (D65) ``(..., 3)`` to linear sRGB, unclipped."""
    return np.asarray(xyz, dtype=np.float64) @ M_XYZ_TO_SRGB.T


def _f(t: np.ndarray) -> np.ndarray:
    return np.where(t > _EPSILON, np.cbrt(t), (_KAPPA * t + 16.0) / 116.0)


def _f_inv(t: np.ndarray) -> np.ndarray:
    t3 = t**3
    return np.where(t3 > _EPSILON, t3, (116.0 * t - 16.0) / _KAPPA)


def xyz_to_lab(xyz: np.ndarray, white: np.ndarray = WHITE_D65) -> np.ndarray:
    """CIE XYZ to CIELAB.

    Parameters
    ----------
    xyz : ndarray of shape (..., 3) — CIE XYZ, white Y = 1.
    white : ndarray of shape (3,) — reference white, default D65 2°.

    Returns
    -------
    ndarray of shape (..., 3) — CIELAB, L* in [0, 100].

    References
    ----------
    CIE 015:2018 [2]_, equations 8.1-8.3, with the exact threshold
    (6/29)^3 and slope (29/3)^3.

    Examples
    --------
    >>> xyz_to_lab(WHITE_D65).round(6).tolist()
    [100.0, 0.0, 0.0]
    """
    xyz = np.asarray(xyz, dtype=np.float64)
    fx, fy, fz = np.moveaxis(_f(xyz / np.asarray(white)), -1, 0)
    return np.stack([116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)], axis=-1)


def lab_to_xyz(lab: np.ndarray, white: np.ndarray = WHITE_D65) -> np.ndarray:
    """CIELAB ``(..., 3)`` to CIE XYZ (white Y = 1); inverse of :func:`xyz_to_lab`."""
    lab = np.asarray(lab, dtype=np.float64)
    L, a, b = np.moveaxis(lab, -1, 0)  # noqa: N806
    fy = (L + 16.0) / 116.0
    fx = fy + a / 500.0
    fz = fy - b / 200.0
    return np.stack([_f_inv(fx), _f_inv(fy), _f_inv(fz)], axis=-1) * np.asarray(white)


def srgb_to_lab(srgb: np.ndarray) -> np.ndarray:
    """sRGB-encoded ``(..., 3)`` in [0, 1] to CIELAB D65/2°."""
    return xyz_to_lab(linear_srgb_to_xyz(srgb_to_linear(np.asarray(srgb, dtype=np.float64))))


def lab_to_srgb(lab: np.ndarray) -> np.ndarray:
    """CIELAB D65/2° ``(..., 3)`` to sRGB-encoded values clipped to [0, 1] (for display)."""
    lin = np.clip(xyz_to_linear_srgb(lab_to_xyz(lab)), 0.0, 1.0)
    return linear_to_srgb(lin)


def lab_to_lch(lab: np.ndarray) -> np.ndarray:
    """CIELAB to CIE LCh(ab): L*, chroma C*ab, hue angle h_ab in degrees [0, 360).

    References
    ----------
    CIE 015:2018 [2]_, equations 8.4 and 8.5.
    """
    lab = np.asarray(lab, dtype=np.float64)
    c = np.hypot(lab[..., 1], lab[..., 2])
    h = np.degrees(np.arctan2(lab[..., 2], lab[..., 1])) % 360.0
    return np.stack([lab[..., 0], c, h], axis=-1)


def delta_e00(lab1: np.ndarray, lab2: np.ndarray) -> np.ndarray:
    """CIEDE2000 colour difference, k_L = k_C = k_H = 1.

    Parameters
    ----------
    lab1, lab2 : ndarray of shape (..., 3) — CIELAB, L* in [0, 100].

    Returns
    -------
    ndarray of shape (...) — ΔE00.

    Notes
    -----
    Delegates to scikit-image's ``deltaE_ciede2000``, which implements
    Sharma, Wu & Dalal (2005) [3]_; tubevision's tests check this wrapper
    against that paper's Table 1.

    References
    ----------
    .. [3] as in the module docstring.

    Examples
    --------
    >>> round(float(delta_e00(np.array([50.0, 2.6772, -79.7751]),
    ...                       np.array([50.0, 0.0, -82.7485]))), 4)
    2.0425
    """
    from skimage.color import deltaE_ciede2000

    return np.asarray(
        deltaE_ciede2000(np.asarray(lab1, dtype=np.float64), np.asarray(lab2, dtype=np.float64))
    )


def adapt_bradford(xyz: np.ndarray, white_src: np.ndarray, white_dst: np.ndarray) -> np.ndarray:
    """Chromatic adaptation of CIE XYZ with the linearised Bradford transform.

    Parameters
    ----------
    xyz : ndarray of shape (..., 3) — CIE XYZ seen under ``white_src``.
    white_src, white_dst : ndarray of shape (3,) — source and destination whites, Y = 1.

    Returns
    -------
    ndarray of shape (..., 3) — corresponding colours under ``white_dst``.

    References
    ----------
    Lam (1985) [4]_; von Kries scaling in the Bradford cone space, as in
    ICC.1:2022 Annex E.

    Examples
    --------
    >>> adapt_bradford(WHITE_D50, WHITE_D50, WHITE_D65).round(5).tolist()
    [0.95047, 1.0, 1.08883]
    """
    src = M_BRADFORD @ np.asarray(white_src, dtype=np.float64)
    dst = M_BRADFORD @ np.asarray(white_dst, dtype=np.float64)
    m = np.linalg.inv(M_BRADFORD) @ np.diag(dst / src) @ M_BRADFORD
    return np.asarray(xyz, dtype=np.float64) @ m.T
