"""Find the reference card in a photo and sample its patches.

Markers are found on a reduced copy of the photo (OpenCV's ArUco detector),
their corners are mapped back to full resolution and give, with RANSAC, the
homography from card millimetres to photo pixels. Each patch is then
sampled on the full-resolution photo, in linear light, over its inner 60 %
(away from the patch edges, where print registration and blur mix
neighbours), with a trimmed mean that drops the brightest and darkest fifth
of the pixels by luminance (glare specks, dust).

A patch is left out, with a warning, when it is clipped (any channel at or
above :data:`CLIP_CODE_FRACTION` of full scale in more than
:data:`PATCH_MAX_CLIPPED_FRACTION` of its pixels) or uneven (luminance
spread above :data:`PATCH_MAX_CV`: a shadow edge or glare across it).

References
----------
.. [1] S. Garrido-Jurado, R. Muñoz-Salinas, F. J. Madrid-Cuevas,
   M. J. Marín-Jiménez, "Automatic generation and detection of highly reliable
   fiducial markers under occlusion", Pattern Recognition 47(6), 2280-2292, 2014.
.. [2] R. Hartley, A. Zisserman, Multiple View Geometry in Computer Vision,
   2nd ed., Cambridge University Press, 2004, §4.1 (DLT homography) and §4.7 (RANSAC).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..image import reduced_copy, to_linear
from .design import card_layout

__all__ = ["CardDetection", "CardNotFound", "find_card", "FIND_MAX_SIDE_PX"]

FIND_MAX_SIDE_PX = 2000
"""Longer side of the copy the markers are searched on: a card filling 3 % of a 12 MP frame
keeps its 14 mm markers about 40 px wide there, ample for 4×4 codes (our measurement on
studio renders)."""
FIRST_TRY_MAX_SIDE_PX = 1000
"""Longer side (px) of the first, quick look for the markers; markers of a card filling
≳ 10 % of the frame's width are then ≳ 15 px wide, enough for a 4×4 ArUco code with its
border (6 cells) at ≥ 2.5 px per cell (our rule). Fewer markers → the full search."""

MIN_MARKERS = 2
"""Markers needed for a pose: two give eight corners, enough for a homography (8 unknowns)."""
PATCH_INNER_FRACTION = 0.6
"""Fraction of the patch side that is sampled, centred (common practice for chart reading)."""
TRIM_FRACTION = 0.2
"""Fraction of pixels dropped at each end of the luminance order before averaging."""
CLIP_CODE_FRACTION = 250 / 255
"""A channel at or above this fraction of full scale is treated as clipped."""
PATCH_MAX_CLIPPED_FRACTION = 0.02
"""A patch with more clipped pixels than this is left out."""
PATCH_MAX_CV = 0.12
"""Largest coefficient of variation of luminance over the trimmed patch pixels; a clean,
evenly lit patch in a phone photo shows about 0.02-0.05 (noise), a shadow edge or glare
across it much more (our measurement on studio renders)."""
MAX_REPROJECTION_PX = 3.0
"""RANSAC inlier threshold for marker corners, in reduced-copy pixels."""


@dataclass(frozen=True)
class CardDetection:
    """A found card.

    ``homography_mm_to_px`` maps card mm (x, y, 1) to photo px (x, y, 1);
    ``corners_px`` is the card outline (4, 2) as (x, y) in full-resolution pixels;
    ``patch_rgb_linear`` (N, 3) linear camera RGB per patch in ``patch_ids`` order,
    NaN where a patch could not be sampled; ``patch_ok`` which patches may be used;
    ``mm_per_px`` the scale at the card's plane.
    """

    homography_mm_to_px: np.ndarray
    corners_px: np.ndarray
    marker_ids: tuple[int, ...]
    patch_ids: tuple[str, ...]
    patch_rgb_linear: np.ndarray
    patch_ok: np.ndarray
    mm_per_px: float
    warnings: tuple[str, ...] = ()

    def __bool__(self) -> bool:
        return True


@dataclass(frozen=True)
class CardNotFound:
    """No usable card in the photo; ``reason`` says why. Falsy."""

    reason: str

    def __bool__(self) -> bool:
        return False


def _project(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
    p = np.c_[pts, np.ones(len(pts))] @ h.T
    return p[:, :2] / p[:, 2:3]


def _scale_mm_per_px(h: np.ndarray, centre_mm: tuple[float, float]) -> float:
    """mm per px at a point: 1 / sqrt(|det J|) of the homography's Jacobian there."""
    cx, cy = centre_mm
    d = 0.5
    pts = np.array([[cx, cy], [cx + d, cy], [cx, cy + d]])
    q = _project(h, pts)
    jac = np.stack([(q[1] - q[0]) / d, (q[2] - q[0]) / d], axis=1)
    px_per_mm = np.sqrt(abs(np.linalg.det(jac)))
    return float(1.0 / px_per_mm)


def _detect_markers(grey: np.ndarray):
    import cv2

    lay = card_layout()
    dictionary = cv2.aruco.getPredefinedDictionary(getattr(cv2.aruco, lay.aruco_dictionary))
    params = cv2.aruco.DetectorParameters()
    params.cornerRefinementMethod = cv2.aruco.CORNER_REFINE_SUBPIX
    detector = cv2.aruco.ArucoDetector(dictionary, params)
    corners, ids, _ = detector.detectMarkers(grey)
    return corners, ids


def find_card(pixels: np.ndarray) -> CardDetection | CardNotFound:
    """Find the card, its pose and scale, and sample its patches.

    Parameters
    ----------
    pixels : ndarray (H, W, 3) uint8 or uint16 — upright photo, sRGB-encoded.

    Returns
    -------
    CardDetection, or CardNotFound(reason) when fewer than :data:`MIN_MARKERS`
    markers of this card are seen.
    """
    import cv2

    lay = card_layout()
    known = {m.id: np.array(m.corners_mm) for m in lay.markers}
    # coarse to fine: a card that fills a good part of the frame shows every marker on a
    # small copy already; a small or partly hidden one is looked for again at full size
    for max_side in (FIRST_TRY_MAX_SIDE_PX, FIND_MAX_SIDE_PX):
        small, scale = reduced_copy(pixels, max_side=max_side)
        grey = cv2.cvtColor(small, cv2.COLOR_RGB2GRAY)
        corners, ids = _detect_markers(grey)
        src, dst, seen = [], [], []
        if ids is not None:
            for c, i in zip(corners, ids.ravel()):
                i = int(i)
                if i in known and i not in seen:
                    seen.append(i)
                    src.append(known[i])
                    dst.append(c.reshape(4, 2))
        if len(seen) == len(known) or max(pixels.shape[:2]) <= max_side:
            break
    if len(seen) < MIN_MARKERS:
        return CardNotFound(f"{len(seen)} of the card's {len(known)} markers seen, "
                            f"{MIN_MARKERS} needed")
    src_a = np.concatenate(src).astype(np.float64)
    dst_a = np.concatenate(dst).astype(np.float64)
    h_small, inliers = cv2.findHomography(src_a, dst_a, cv2.RANSAC, MAX_REPROJECTION_PX)
    if h_small is None:
        return CardNotFound("marker corners do not fit one flat card")
    warnings: list[str] = []
    if len(seen) < len(known):
        missing = sorted(set(known) - set(seen))
        warnings.append(f"card markers {missing} not seen (hidden or out of frame); pose from "
                        f"{len(seen)} markers")
    s = np.diag([scale, scale, 1.0])
    # reduced px → full px: a pixel centre at c maps to (c + 0.5)·scale − 0.5
    shift = np.array([[1, 0, 0.5 * scale - 0.5], [0, 1, 0.5 * scale - 0.5], [0, 0, 1.0]])
    h_full = shift @ s @ h_small
    w_mm, h_mm = lay.size_mm
    outline = _project(h_full, np.array([[0, 0], [w_mm, 0], [w_mm, h_mm], [0, h_mm]], float))
    mm_per_px = _scale_mm_per_px(h_full, (w_mm / 2, h_mm / 2))

    height, width = pixels.shape[:2]
    top = float(np.iinfo(pixels.dtype).max)
    ids_p = lay.patch_ids
    rgb = np.full((len(ids_p), 3), np.nan)
    ok = np.zeros(len(ids_p), dtype=bool)
    bad: list[str] = []
    for k, p in enumerate(lay.patches):
        cx, cy = p.centre_mm
        hw = p.size_mm[0] * PATCH_INNER_FRACTION / 2
        hh = p.size_mm[1] * PATCH_INNER_FRACTION / 2
        quad = _project(h_full, np.array([[cx - hw, cy - hh], [cx + hw, cy - hh],
                                          [cx + hw, cy + hh], [cx - hw, cy + hh]]))
        c0, r0 = np.floor(quad.min(axis=0)).astype(int)
        c1, r1 = np.ceil(quad.max(axis=0)).astype(int) + 1
        if c0 < 0 or r0 < 0 or c1 > width or r1 > height:
            bad.append(f"{p.id} (outside the photo)")
            continue
        crop = pixels[r0:r1, c0:c1]
        mask = np.zeros(crop.shape[:2], np.uint8)
        cv2.fillConvexPoly(mask, np.round(quad - [c0, r0]).astype(np.int32), 1)
        vals = crop[mask.astype(bool)]
        if vals.shape[0] < 9:
            bad.append(f"{p.id} (too small in the photo)")
            continue
        clipped = np.mean(np.any(vals >= CLIP_CODE_FRACTION * top, axis=1))
        lin = to_linear(vals).astype(np.float64)
        lum = lin @ np.array([0.2126, 0.7152, 0.0722])
        order = np.argsort(lum)
        n = len(order)
        keep = order[int(n * TRIM_FRACTION): max(int(n * TRIM_FRACTION) + 1, int(n * (1 - TRIM_FRACTION)))]
        mean = lin[keep].mean(axis=0)
        rgb[k] = mean
        cv = float(lum[keep].std() / max(lum[keep].mean(), 1e-6))
        if clipped > PATCH_MAX_CLIPPED_FRACTION:
            bad.append(f"{p.id} (clipped)")
        elif cv > PATCH_MAX_CV:
            bad.append(f"{p.id} (uneven: shadow or glare)")
        else:
            ok[k] = True
    if bad:
        warnings.append("card patches left out: " + ", ".join(bad))
    return CardDetection(homography_mm_to_px=h_full, corners_px=outline, marker_ids=tuple(sorted(seen)),
                         patch_ids=ids_p, patch_rgb_linear=rgb, patch_ok=ok, mm_per_px=mm_per_px,
                         warnings=tuple(warnings))
