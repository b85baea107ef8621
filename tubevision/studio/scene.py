"""Scenes of a test-tube rack, rendered to phone-like photos with ground truth.

The scene is a flat arrangement in millimetres: a backdrop (light paper,
plain or with dark bands), one or two rows of tubes standing in a rack whose
front bar hides part of each tube, and the reference card, all facing the
camera. It is drawn in camera raw values at the output resolution (each
material's raw colour is computed spectrally once, see
:mod:`tubevision.studio.materials`), warped by a small homography (the phone
is not held exactly square), and developed by :mod:`tubevision.studio.camera`.

Geometry of a tube (common practice: a 16 × 100 mm round-bottom test tube,
wall 0.8 mm): axis at x = cx, rim at y_rim, outer radius R, inner radius
r = R - wall, a hemispherical bottom of centre y_hc = y_rim + length - R.
Seen from the front, a ray at offset d from the axis crosses the liquid along
the chord 2 sqrt(r² - d² - max(y - y_hc, 0)²) (the cylinder; the sphere in
the bottom). The water-filled cylinder acts as a cylindrical lens, so the
backdrop seen through it is mirrored and magnified across the width
(x_seen = cx - M d, M = :data:`LENS_MAGNIFICATION`) while rows stay put.

Truth (``RenderedPhoto.truth``) is in pixels of the upright photo; see
:func:`render_scene` for its keys.

References
----------
.. [1] Capillary length of water sqrt(γ / ρ g) ≈ 2.7 mm at 20 °C (γ = 72.8 mN/m):
   P.-G. de Gennes, F. Brochard-Wyart, D. Quéré, Capillarity and Wetting
   Phenomena, Springer 2004, ch. 1 (meniscus shape near a wall ~ exp(-x / l_c)).
.. [2] E. Hecht, Optics, 5th ed., Pearson 2017, Sec. 5.2 (thick lenses; a
   liquid-filled cylinder forms an inverted image across its width).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..backdrop import BAND_WIDTH_MM
from ..errors import TubevisionInputError
from . import materials as mat
from .camera import CameraSpec, develop, raw_basis
from .spectra import WAVELENGTHS_NM, object_lab_d65

__all__ = ["TubeSpec", "SceneSpec", "RenderedPhoto", "render_scene", "BACKDROPS", "EXIF_ORIENTATIONS"]

BACKDROPS = ("plain", "hbands", "vbands")
"""Backdrop kinds: plain light paper, dark horizontal bands, dark vertical bands."""

EXIF_ORIENTATIONS = (1, 3, 6, 8)
"""EXIF orientation tags the studio writes (EXIF 2.32 Table 4: 1 upright, 3 rotated 180°,
6 display = stored turned 90° clockwise, 8 display = stored turned 90° counter-clockwise)."""

TUBE_WALL_MM = 0.8
"""Glass wall thickness (mm), common practice for 16 mm soda-lime test tubes."""

TUBE_PITCH_GAP_MM = 6.0
"""Gap between neighbouring tubes in the rack (mm); our layout choice."""

RACK_BAR_FROM_RIM_MM = (62.0, 74.0)
"""Front bar of the rack, from/to this far below the rims (mm): it hides part of the
lower-middle of each 100 mm tube while leaving a 42+ mm fill's meniscus and a ≤ 12 mm
pellet visible (our layout choice)."""

RACK_POST_WIDTH_MM = 8.0
"""Width of the rack's end posts (mm); our layout choice."""

RACK_BASE_HEIGHT_MM = 8.0
"""Height of the rack's base plate under the tubes (mm); our layout choice."""

LENS_MAGNIFICATION = 1.6
"""Apparent mirror-magnification of the backdrop across a water-filled tube (paraxial
estimate from memory for a 16 mm tube a few cm in front of the backdrop; Hecht [2]_)."""

MENISCUS_RISE_MM = 1.5
"""Rise of a water meniscus at the glass wall (mm), below the capillary length (de Gennes [1]_)."""

CAPILLARY_LENGTH_MM = 2.7
"""Capillary length of water (mm), de Gennes et al. [1]_."""

MENISCUS_BAND_MM = 0.8
"""Height of the dark band the meniscus shows from the side (total internal reflection at the
curved surface; from memory), centred on the surface."""

MENISCUS_DARKENING = 0.35
"""Factor applied to the meniscus band (from memory: it looks a dark grey line)."""

WALL_DARKENING = 0.5
"""Factor on the backdrop seen through the glass wall at grazing angles (from memory)."""

RIM_LIP_MM = 1.0
"""Height of the thickened rim (mm), drawn darker by :data:`WALL_DARKENING` (common practice)."""

PELLET_SHADING = 0.3
"""Lambert fall-off across a settled solid: factor 1 - 0.3 (d / r)² (our approximation of a
cylinder lit from the front)."""

SPECULAR_STREAKS = ((-0.62, 0.04, 0.45), (0.74, 0.03, 0.18))
"""Specular streaks on the glass: (position d / R, Gaussian sigma in d / R, peak in units of
the perfect white), from a window or lamp up-left of the camera (our choice). They lie outside
the central third of the width, as on a real tube lit from the side."""

RACK_MATERIALS = {
    "white": 0.72 + 0.0 * WAVELENGTHS_NM,
    "blue": 0.06 + 0.50 * np.exp(-0.5 * ((WAVELENGTHS_NM - 465.0) / 40.0) ** 2),
    "grey": 0.30 + 0.0 * WAVELENGTHS_NM,
}
"""Rack plastics, reflectance (invented, representative polypropylene colours)."""



@dataclass(frozen=True)
class TubeSpec:
    """One tube in the rack.

    Attributes
    ----------
    contents : str — key of :data:`tubevision.studio.materials.CONTENTS`.
    fill_mm : float — liquid height on the axis above the inner bottom (mm); ignored when empty.
    pellet_mm : float or None — settled solid height on the axis (mm); None = the contents' default.
    strength : float or None — solute strength (1 = tabulated); None = the contents' default.
    turbidity : float or None — τ (see :mod:`materials`); None = the contents' default.
    label : str or None — a name for the tube (e.g. ``"control"``), carried into the truth.
    """

    contents: str = "water"
    fill_mm: float = 50.0
    pellet_mm: float | None = None
    strength: float | None = None
    turbidity: float | None = None
    label: str | None = None


@dataclass(frozen=True)
class SceneSpec:
    """A whole photo: tubes, rack, backdrop, card, light and camera.

    Attributes
    ----------
    tubes : tuple of TubeSpec — 1-24 tubes in reading order (row 0 first).
    rows : int — 1 or 2; with 2, the first ceil(n / 2) tubes stand in the upper rack.
    illuminant : str — see :func:`tubevision.studio.spectra.illuminant_spd`.
    camera : CameraSpec.
    backdrop : str — one of :data:`BACKDROPS`.
    band_mm : float — band width of a banded backdrop (mm); default the printable backdrop's
        (:data:`tubevision.backdrop.BAND_WIDTH_MM`).
    band_shift_mm : float — the backdrop moved by this much against the rack, on top of the
        seed's random phase (a re-take with the rack moved by one band: ``band_shift_mm=band_mm``
        and the same seed swaps light and dark bands behind everything, the rest unchanged).
    light_gradient : (float, float) — relative change of the illumination across the whole
        frame, left→right and top→bottom (e.g. 0.1 = 10 % brighter on the right); 0 = even light.
    rack : bool — draw the rack (front bar, posts, base).
    rack_colour : str — key of :data:`RACK_MATERIALS`.
    card : str — ``"auto"`` (the tool's card when ``tubevision.card`` exists, else a plain
        neutral target), ``"plain"`` or ``"none"``.
    card_side : str — ``"auto"``, ``"right"`` or ``"below"``: where the card lies.
    card_angle_deg : float — the card turned in the scene plane, -10 to 10 degrees
        (positive turns it clockwise as seen in the photo).
    width_px, height_px : int — size of the upright photo.
    exif_orientation : int — one of :data:`EXIF_ORIENTATIONS`.
    zoom : float — fraction of the frame the content fills, 0.5-0.95.
    tube_diameter_mm, tube_length_mm : float — outer diameter and length of the tubes.
    specular : float — strength of the specular streaks, 0-2.
    scenario : str — free text for the truth.
    """

    tubes: tuple[TubeSpec, ...] = (TubeSpec(),)
    rows: int = 1
    illuminant: str = "D65"
    camera: CameraSpec = field(default_factory=CameraSpec)
    backdrop: str = "plain"
    band_mm: float = BAND_WIDTH_MM
    band_shift_mm: float = 0.0
    rack: bool = True
    rack_colour: str = "white"
    card: str = "auto"
    card_side: str = "auto"
    card_angle_deg: float = 0.0
    width_px: int = 2016
    height_px: int = 1512
    exif_orientation: int = 1
    zoom: float = 0.84
    tube_diameter_mm: float = 16.0
    tube_length_mm: float = 100.0
    specular: float = 1.0
    light_gradient: tuple[float, float] = (0.0, 0.0)
    scenario: str = ""

    def with_(self, **changes) -> "SceneSpec":
        """A copy with some fields changed."""
        return replace(self, **changes)


@dataclass(frozen=True)
class RenderedPhoto:
    """A rendered photo and its ground truth.

    Attributes
    ----------
    pixels : ndarray (H, W, 3) uint8 — sRGB-encoded, **as stored** in the file (before the
        EXIF orientation is applied); equal to :attr:`upright` when the tag is 1.
    exif_orientation : int — the tag a viewer applies to show it upright.
    truth : dict — JSON-able ground truth in upright pixel coordinates.
    encoded : bytes or None — the JPEG stream the pixels were decoded from (no EXIF yet).
    """

    pixels: np.ndarray
    exif_orientation: int
    truth: dict
    encoded: bytes | None = None

    @property
    def upright(self) -> np.ndarray:
        """The pixels as a person sees them (EXIF orientation applied)."""
        from ..image import _orient

        return _orient(self.pixels, self.exif_orientation)


# --------------------------------------------------------------------------------------
# validation and layout


def _validate(spec: SceneSpec) -> list[mat.Contents]:
    n = len(spec.tubes)
    if not 1 <= n <= 24:
        raise TubevisionInputError(f"scene has {n} tubes: give 1-24")
    if spec.rows not in (1, 2) or (spec.rows == 2 and n < 2):
        raise TubevisionInputError(f"rows={spec.rows}: give 1, or 2 with at least 2 tubes")
    if spec.backdrop not in BACKDROPS:
        raise TubevisionInputError(f"backdrop {spec.backdrop!r}: choose one of {', '.join(BACKDROPS)}")
    if spec.card not in ("auto", "plain", "none"):
        raise TubevisionInputError(f"card {spec.card!r}: choose auto, plain or none")
    if spec.card_side not in ("auto", "right", "below"):
        raise TubevisionInputError(f"card_side {spec.card_side!r}: choose auto, right or below")
    if not -10.0 <= spec.card_angle_deg <= 10.0:
        raise TubevisionInputError(f"card_angle_deg {spec.card_angle_deg}: give -10 to 10")
    if spec.exif_orientation not in EXIF_ORIENTATIONS:
        raise TubevisionInputError(f"exif_orientation {spec.exif_orientation}: choose one of 1, 3, 6, 8")
    if not (64 <= spec.width_px <= 8192 and 64 <= spec.height_px <= 8192):
        raise TubevisionInputError(f"photo size {spec.width_px}x{spec.height_px}: give 64-8192 px a side")
    if not 0.5 <= spec.zoom <= 0.95:
        raise TubevisionInputError(f"zoom {spec.zoom}: give 0.5-0.95")
    if not (8.0 <= spec.tube_diameter_mm <= 30.0 and 60.0 <= spec.tube_length_mm <= 200.0):
        raise TubevisionInputError("tube size: give a diameter of 8-30 mm and a length of 60-200 mm")
    if len(spec.light_gradient) != 2 or max(abs(float(v)) for v in spec.light_gradient) > 0.5:
        raise TubevisionInputError(f"light_gradient {spec.light_gradient}: give two values in -0.5..0.5")
    if spec.rack_colour not in RACK_MATERIALS:
        raise TubevisionInputError(f"rack_colour {spec.rack_colour!r}: choose one of {', '.join(RACK_MATERIALS)}")
    if not 1.0 <= spec.band_mm <= 20.0:
        raise TubevisionInputError(f"band_mm {spec.band_mm}: give 1-20 mm")
    if not (np.isfinite(spec.band_shift_mm) and abs(spec.band_shift_mm) <= 100.0):
        raise TubevisionInputError(f"band_shift_mm {spec.band_shift_mm}: give -100..100 mm")
    out = []
    inner_len = spec.tube_length_mm - 2 * TUBE_WALL_MM
    for i, t in enumerate(spec.tubes):
        c = mat.contents(t.contents)
        pellet = c.pellet_mm if t.pellet_mm is None else t.pellet_mm
        if not 0.0 <= pellet <= 0.15 * spec.tube_length_mm:
            raise TubevisionInputError(f"tube {i + 1}: pellet_mm {pellet}: give 0-{0.15 * spec.tube_length_mm:g} mm")
        if not c.empty and not pellet + 5.0 <= t.fill_mm <= inner_len - 15.0:
            raise TubevisionInputError(
                f"tube {i + 1}: fill_mm {t.fill_mm}: give {pellet + 5.0:g}-{inner_len - 15.0:g} mm")
        if t.strength is not None and not 0.0 <= t.strength <= 10.0:
            raise TubevisionInputError(f"tube {i + 1}: strength {t.strength}: give 0-10")
        if t.turbidity is not None and not 0.0 <= t.turbidity <= 50.0:
            raise TubevisionInputError(f"tube {i + 1}: turbidity {t.turbidity}: give 0-50")
        out.append(c)
    return out


@dataclass(frozen=True)
class _Layout:
    px_per_mm: float
    tube_cx_mm: tuple[float, ...]
    tube_rim_mm: tuple[float, ...]
    tube_row: tuple[int, ...]
    rack_boxes_mm: tuple[tuple[float, float, float], ...]   # per row: x0, x1, rim y
    card_origin_mm: tuple[float, float] | None
    card_size_mm: tuple[float, float] | None


def _layout(spec: SceneSpec, card_size_mm: tuple[float, float] | None) -> _Layout:
    n = len(spec.tubes)
    per_row = [n] if spec.rows == 1 else [(n + 1) // 2, n // 2]
    pitch = spec.tube_diameter_mm + TUBE_PITCH_GAP_MM
    rack_margin = RACK_POST_WIDTH_MM + 6.0
    row_w = [k * pitch + 2 * rack_margin for k in per_row]
    row_h = spec.tube_length_mm + RACK_BASE_HEIGHT_MM
    row_gap = 22.0
    racks_w = max(row_w)
    racks_h = spec.rows * row_h + (spec.rows - 1) * row_gap
    gap = 18.0
    aspect = spec.width_px / spec.height_px
    side = spec.card_side
    if card_size_mm is not None and side == "auto":
        right = (racks_w + gap + card_size_mm[0], max(racks_h, card_size_mm[1]))
        below = (max(racks_w, card_size_mm[0]), racks_h + gap + card_size_mm[1])
        def fit(wh):  # noqa: E306
            return min(aspect * wh[1] / wh[0], wh[0] / (aspect * wh[1]))
        side = "right" if fit(right) >= fit(below) else "below"
    if card_size_mm is None:
        cw, ch = racks_w, racks_h
    elif side == "right":
        cw, ch = racks_w + gap + card_size_mm[0], max(racks_h, card_size_mm[1])
    else:
        cw, ch = max(racks_w, card_size_mm[0]), racks_h + gap + card_size_mm[1]
    ppm = min(spec.zoom * spec.width_px / cw, spec.zoom * spec.height_px / ch)
    x_off = (spec.width_px / ppm - cw) / 2.0
    y_off = (spec.height_px / ppm - ch) / 2.0
    cxs, rims, rws, racks = [], [], [], []
    for r, k in enumerate(per_row):
        x0 = x_off + (racks_w - row_w[r]) / 2.0
        rim = y_off + r * (row_h + row_gap) + (ch - racks_h) / 2.0 * (side == "right")
        racks.append((x0, x0 + row_w[r], rim))
        for j in range(k):
            cxs.append(x0 + rack_margin + (j + 0.5) * pitch)
            rims.append(rim)
            rws.append(r)
    origin = None
    if card_size_mm is not None:
        if side == "right":
            origin = (x_off + racks_w + gap, y_off + (ch - card_size_mm[1]) / 2.0)
        else:
            origin = (x_off + (cw - card_size_mm[0]) / 2.0, y_off + racks_h + gap)
    return _Layout(ppm, tuple(cxs), tuple(rims), tuple(rws), tuple(racks), origin, card_size_mm)


# --------------------------------------------------------------------------------------
# drawing


def _band_is_dark(coord_mm: np.ndarray, band_mm: float, phase_mm: float) -> np.ndarray:
    return (np.floor((coord_mm - phase_mm) / band_mm).astype(np.int64) % 2) == 1


class _Backdrop:
    def __init__(self, spec: SceneSpec, white_raw: np.ndarray, phase_mm: float):
        self.kind = spec.backdrop
        self.band = spec.band_mm
        self.phase = phase_mm
        self.light = (mat.BACKDROP_LIGHT_REFLECTANCE * white_raw).astype(np.float32)
        self.dark = (mat.BACKDROP_DARK_REFLECTANCE * white_raw).astype(np.float32)

    def dark_mask(self, x_mm: np.ndarray, y_mm: np.ndarray) -> np.ndarray:
        if self.kind == "plain":
            return np.zeros(np.broadcast(x_mm, y_mm).shape, bool)
        if self.kind == "hbands":
            return np.broadcast_to(_band_is_dark(y_mm, self.band, self.phase), np.broadcast(x_mm, y_mm).shape)
        return np.broadcast_to(_band_is_dark(x_mm, self.band, self.phase), np.broadcast(x_mm, y_mm).shape)

    def fill(self, raw: np.ndarray, ppm: float) -> None:
        h, w = raw.shape[:2]
        raw[:] = self.light
        if self.kind == "hbands":
            rows = _band_is_dark((np.arange(h) + 0.5) / ppm, self.band, self.phase)
            raw[rows] = self.dark
        elif self.kind == "vbands":
            cols = _band_is_dark((np.arange(w) + 0.5) / ppm, self.band, self.phase)
            raw[:, cols] = self.dark


@dataclass(frozen=True)
class _TubeGeom:
    cx: float
    rim: float
    R: float   # noqa: N815  (outer radius, the usual symbol)
    r: float
    y_hc: float
    y_bottom: float
    y_inner_bottom: float
    y_surface: float | None
    y_pellet: float | None


def _tube_geom(spec: SceneSpec, t: TubeSpec, c: mat.Contents, cx: float, rim: float) -> _TubeGeom:
    big_r = spec.tube_diameter_mm / 2.0
    r = big_r - TUBE_WALL_MM
    y_hc = rim + spec.tube_length_mm - big_r
    y_ib = y_hc + r
    pellet = c.pellet_mm if t.pellet_mm is None else t.pellet_mm
    surf = None if c.empty else y_ib - t.fill_mm
    y_p = y_ib - pellet if (pellet > 0 and not c.empty) else None
    return _TubeGeom(cx, rim, big_r, r, y_hc, rim + spec.tube_length_mm, y_ib, surf, y_p)


def _meniscus_y(g: _TubeGeom, d: np.ndarray) -> np.ndarray:
    """Surface height across the width: rises toward the wall as exp(-(r - |d|) / l_c) [1]_."""
    return g.y_surface - MENISCUS_RISE_MM * np.exp(-(g.r - np.minimum(np.abs(d), g.r)) / CAPILLARY_LENGTH_MM)


def _liquid_luts(c: mat.Contents, t: TubeSpec, g: _TubeGeom, basis: np.ndarray):
    path = np.linspace(0.0, 2.0 * g.r, 48)
    trans, veil = mat.liquid_optics(c, strength=t.strength, turbidity=t.turbidity,
                                    inner_diameter_mm=2.0 * g.r, path_mm=path)
    f = mat.GLASS_FACTOR_FILLED
    light = (f * (trans * mat.BACKDROP_LIGHT_REFLECTANCE + veil)) @ basis
    dark = (f * (trans * mat.BACKDROP_DARK_REFLECTANCE + veil)) @ basis
    return path, light.astype(np.float32), dark.astype(np.float32)


def _interp3(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    return np.stack([np.interp(x, xp, fp[:, k]) for k in range(3)], axis=-1).astype(np.float32)


def _draw_tube(raw: np.ndarray, ppm: float, g: _TubeGeom, c: mat.Contents, t: TubeSpec,
               basis: np.ndarray, white_raw: np.ndarray, backdrop: _Backdrop, specular: float) -> None:
    h, w = raw.shape[:2]
    c0 = max(int(np.floor((g.cx - g.R) * ppm)) - 1, 0)
    c1 = min(int(np.ceil((g.cx + g.R) * ppm)) + 1, w)
    r0 = max(int(np.floor(g.rim * ppm)) - 1, 0)
    r1 = min(int(np.ceil(g.y_bottom * ppm)) + 1, h)
    if c1 <= c0 or r1 <= r0:
        return
    x = (np.arange(c0, c1) + 0.5) / ppm
    y = (np.arange(r0, r1) + 0.5) / ppm
    d = (x - g.cx)[None, :]
    yy = y[:, None]
    below = np.maximum(yy - g.y_hc, 0.0)
    outer = (np.abs(d) <= g.R) & (yy >= g.rim) & (d * d + below * below <= g.R * g.R)
    inner = (np.abs(d) <= g.r) & (yy >= g.rim) & (d * d + below * below <= g.r * g.r)
    wall = outer & ~inner
    patch = raw[r0:r1, c0:c1]

    # glass wall and air: the backdrop, seen straight through (x_seen = cx + d)
    dark_straight = backdrop.dark_mask(g.cx + d, yy)
    back = np.where(dark_straight[..., None], backdrop.dark, backdrop.light)
    air = inner.copy()
    if g.y_surface is not None:
        ymen = _meniscus_y(g, d)
        air &= yy < ymen - MENISCUS_BAND_MM / 2
    patch[air] = back[air] * np.float32(mat.GLASS_FACTOR_EMPTY)
    edge = wall & (np.abs(d) > g.R - 0.35)
    patch[wall] = back[wall] * np.float32(mat.GLASS_FACTOR_EMPTY * WALL_DARKENING)
    patch[edge] *= np.float32(0.6)

    if g.y_surface is not None:
        liquid = inner & (yy >= ymen - MENISCUS_BAND_MM / 2)
        if g.y_pellet is not None:
            liquid &= yy < g.y_pellet
        if liquid.any():
            path_grid, lut_light, lut_dark = _liquid_luts(c, t, g, basis)
            chord = 2.0 * np.sqrt(np.maximum(g.r * g.r - d * d - below * below, 0.0))
            chord = np.broadcast_to(chord, liquid.shape)[liquid]
            dark_lens = backdrop.dark_mask(np.broadcast_to(g.cx - LENS_MAGNIFICATION * d, liquid.shape),
                                           np.broadcast_to(yy, liquid.shape))[liquid]
            vals = np.where(dark_lens[:, None], _interp3(chord, path_grid, lut_dark),
                            _interp3(chord, path_grid, lut_light))
            patch[liquid] = vals
            band = inner & (np.abs(yy - ymen) < MENISCUS_BAND_MM / 2)
            patch[band] *= np.float32(MENISCUS_DARKENING)
        if g.y_pellet is not None:
            pel = inner & (yy >= g.y_pellet)
            rho = mat.solid_reflectance(c.solid) * mat.GLASS_FACTOR_FILLED
            prgb = (rho @ basis).astype(np.float32)
            shade = (1.0 - PELLET_SHADING * (d / g.r) ** 2).astype(np.float32)
            shade = np.broadcast_to(shade, pel.shape)[pel]
            patch[pel] = prgb[None, :] * shade[:, None]

    lip = outer & (yy < g.rim + RIM_LIP_MM)
    patch[lip] *= np.float32(WALL_DARKENING)
    if specular > 0:
        u = d / g.R
        s = sum(p * np.exp(-0.5 * ((u - m) / sd) ** 2) for m, sd, p in SPECULAR_STREAKS) * specular
        s = np.broadcast_to(s, outer.shape)
        streak = outer & (yy < g.y_hc + 0.5 * g.R) & (s > 1e-3)
        patch[streak] += s[streak][:, None].astype(np.float32) * white_raw.astype(np.float32)[None, :]


def _draw_rack(raw: np.ndarray, ppm: float, spec: SceneSpec, lay: _Layout, basis: np.ndarray) -> list[tuple[float, float]]:
    rgb = (RACK_MATERIALS[spec.rack_colour] @ basis).astype(np.float32)
    bars = []
    h, w = raw.shape[:2]

    def rect(x0, y0, x1, y1, shade=1.0):
        a0, a1 = int(round(y0 * ppm)), int(round(y1 * ppm))
        b0, b1 = int(round(x0 * ppm)), int(round(x1 * ppm))
        raw[max(a0, 0):min(a1, h), max(b0, 0):min(b1, w)] = rgb * np.float32(shade)

    for x0, x1, rim in lay.rack_boxes_mm:
        base_y = rim + spec.tube_length_mm
        rect(x0, rim + 30.0, x0 + RACK_POST_WIDTH_MM, base_y, 0.9)
        rect(x1 - RACK_POST_WIDTH_MM, rim + 30.0, x1, base_y, 0.9)
        rect(x0, base_y, x1, base_y + RACK_BASE_HEIGHT_MM, 0.85)
        b0, b1 = rim + RACK_BAR_FROM_RIM_MM[0], rim + RACK_BAR_FROM_RIM_MM[1]
        rect(x0, b0, x1, b1, 1.0)
        rect(x0, b0, x1, b0 + 0.8, 1.15)   # lit top edge of the bar
        bars.append((b0, b1))
    return bars


# --------------------------------------------------------------------------------------
# truth helpers


def _apply_h(hmat: np.ndarray, pts_px: np.ndarray) -> np.ndarray:
    p = np.column_stack([pts_px, np.ones(len(pts_px))]) @ hmat.T
    return p[:, :2] / p[:, 2:3]


def _truth_liquid(c: mat.Contents, t: TubeSpec, g: _TubeGeom) -> tuple[list[float], float]:
    d = np.linspace(-g.r / 3.0, g.r / 3.0, 41)
    path = 2.0 * np.sqrt(g.r * g.r - d * d)
    trans, veil = mat.liquid_optics(c, strength=t.strength, turbidity=t.turbidity,
                                    inner_diameter_mm=2.0 * g.r, path_mm=path)
    refl = (mat.GLASS_FACTOR_FILLED * (trans * mat.BACKDROP_LIGHT_REFLECTANCE + veil)).mean(axis=0)
    tau = (c.turbidity if t.turbidity is None else t.turbidity) if c.solid is not None else 0.0
    return [float(v) for v in object_lab_d65(refl)], float(tau)


def _truth_pellet(c: mat.Contents) -> list[float]:
    u = np.linspace(-1.0 / 3.0, 1.0 / 3.0, 41)
    shade = (1.0 - PELLET_SHADING * u * u).mean()
    refl = mat.solid_reflectance(c.solid) * mat.GLASS_FACTOR_FILLED * shade
    return [float(v) for v in object_lab_d65(refl)]


def _to_stored(upright: np.ndarray, tag: int) -> np.ndarray:
    """Inverse of the EXIF orientation a viewer applies (EXIF 2.32 Table 4)."""
    if tag == 3:
        return np.ascontiguousarray(upright[::-1, ::-1])
    if tag == 6:
        return np.ascontiguousarray(np.rot90(upright, 1))
    if tag == 8:
        return np.ascontiguousarray(np.rot90(upright, -1))
    return upright


def _jpeg_roundtrip(pixels: np.ndarray, quality: int) -> tuple[np.ndarray, bytes]:
    import cv2

    ok, buf = cv2.imencode(".jpg", pixels[:, :, ::-1], [cv2.IMWRITE_JPEG_QUALITY, int(quality)])
    if not ok:  # pragma: no cover - cv2 always encodes a uint8 RGB image
        raise RuntimeError("JPEG encoding failed")
    dec = cv2.imdecode(buf, cv2.IMREAD_COLOR)[:, :, ::-1]
    return np.ascontiguousarray(dec), buf.tobytes()


# --------------------------------------------------------------------------------------
# the public entry point


def render_scene(spec: SceneSpec, *, seed: int) -> RenderedPhoto:
    """Render a rack photo with ground truth.

    Parameters
    ----------
    spec : SceneSpec — what to render.
    seed : int — seeds everything random (noise, band phase, perspective); same seed and
        spec give the same pixels.

    Returns
    -------
    RenderedPhoto. ``truth`` keys (pixels of the upright photo, boxes ``[x0, y0, x1, y1]``
    half-open, rows/cols as integers):

    * ``size`` [width, height]; ``conditions`` (illuminant, sensor, camera settings, backdrop,
      seed, exif_orientation, homography, white-balance gains, scenario);
    * ``tubes``: per tube in reading order — ``index``, ``row``, ``label``, ``contents``,
      ``bbox`` (glass from rim to bottom), ``axis_col``, ``inner_col0``/``inner_col1``,
      ``rim_row``, ``meniscus_row`` (surface on the axis), ``liquid_top`` (first row below the
      meniscus band), ``liquid_bottom`` (last liquid row + 1 on the axis: pellet top or inner
      bottom), ``bottom_top`` (start of the round bottom), ``inner_bottom`` (row of the inside
      bottom on the axis), ``occluded_rows`` (rack bar [row0, row1) or null), ``state``,
      ``liquid`` {lab, colour_name, turbidity} or null, ``lab`` (the same liquid Lab, or null;
      a shortcut), ``pellet`` {present, height_mm, lab,
      colour_name, top_row};
    * ``card``: ``kind``, ``corners_px`` (TL, TR, BR, BL of the card outline as x, y),
      ``markers``, ``patches`` (id, centre_px, nominal_srgb, lab_d65), ``size_mm`` — or null;
    * ``mm_per_px`` at the card plane (the tubes stand in the same plane).

    The true liquid Lab is the D65/2° object colour of the column over the light backdrop,
    averaged (as reflectance) over the central third of the inner width:
    g (T R_light + R_v) (see :mod:`tubevision.studio.materials`).

    Raises
    ------
    TubevisionInputError — a spec value out of range.
    """
    import cv2

    from .card_art import card_art, card_raw

    contents_list = _validate(spec)
    rng = np.random.default_rng(seed)
    cam = spec.camera
    basis = raw_basis(cam.sensor, spec.illuminant)
    white_raw = np.ones(WAVELENGTHS_NM.size) @ basis
    art = None if spec.card == "none" else card_art(spec.card)
    lay = _layout(spec, None if art is None else art.size_mm)
    ppm = lay.px_per_mm
    h, w = spec.height_px, spec.width_px

    raw = np.empty((h, w, 3), np.float32)
    backdrop = _Backdrop(spec, white_raw, float(rng.uniform(0.0, 2.0 * spec.band_mm)) + spec.band_shift_mm)
    backdrop.fill(raw, ppm)

    geoms = []
    for t, c, cx, rim in zip(spec.tubes, contents_list, lay.tube_cx_mm, lay.tube_rim_mm):
        g = _tube_geom(spec, t, c, cx, rim)
        geoms.append(g)
        _draw_tube(raw, ppm, g, c, t, basis, white_raw, backdrop, spec.specular)
    bars = _draw_rack(raw, ppm, spec, lay, basis) if spec.rack else [None] * spec.rows

    card_truth = None
    if art is not None:
        ox, oy = lay.card_origin_mm
        cw, ch = art.size_mm
        img, patch_spectra = card_raw(art, basis)
        # scale the art to the scene (area averaging), then place it turned by card_angle_deg
        small = cv2.resize(img, (max(1, int(round(cw * ppm))), max(1, int(round(ch * ppm)))),
                           interpolation=cv2.INTER_AREA)
        sx, sy = small.shape[1] / cw, small.shape[0] / ch     # px per mm of the scaled art
        th = np.radians(spec.card_angle_deg)
        rot = np.array([[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]])
        centre = np.array([(ox + cw / 2) * ppm, (oy + ch / 2) * ppm])
        # affine map from mm on the card (origin top-left) to scene px
        lin = rot @ np.diag([ppm, ppm])
        off = centre - lin @ np.array([cw / 2, ch / 2])
        a_px = np.column_stack([lin @ np.diag([1 / sx, 1 / sy]), off])   # art px -> scene px
        warped = cv2.warpAffine(small, a_px, (w, h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT)
        mask = cv2.warpAffine(np.ones(small.shape[:2], np.float32), a_px, (w, h), flags=cv2.INTER_LINEAR,
                              borderMode=cv2.BORDER_CONSTANT)
        raw *= (1.0 - mask)[..., None]
        raw += warped
        card_truth = {"art": art, "mm_to_px": np.column_stack([lin, off]), "spectra": patch_spectra}

    gx, gy = (float(v) for v in spec.light_gradient)
    if gx or gy:
        col = (1.0 + gx * ((np.arange(w) + 0.5) / w - 0.5)).astype(np.float32)
        row = (gy * ((np.arange(h) + 0.5) / h - 0.5)).astype(np.float32)
        raw *= (col[None, :] + row[:, None])[..., None]

    # perspective: the phone is not held square
    src = np.array([[0, 0], [w, 0], [w, h], [0, h]], np.float64)
    jit = rng.uniform(-1.0, 1.0, (4, 2)) * cam.perspective * w
    hmat = cv2.getPerspectiveTransform(src.astype(np.float32), (src + jit).astype(np.float32)).astype(np.float64)
    if cam.perspective > 0:
        raw = cv2.warpPerspective(raw, hmat, (w, h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)

    pixels, dev = develop(raw, cam, spec.illuminant, rng)
    truth = _truth(spec, contents_list, geoms, lay, bars, hmat, card_truth, seed, dev)

    stored = _to_stored(pixels, spec.exif_orientation)
    encoded = None
    if cam.jpeg_quality is not None:
        stored, encoded = _jpeg_roundtrip(stored, cam.jpeg_quality)
    return RenderedPhoto(stored, spec.exif_orientation, truth, encoded)


def _truth(spec, contents_list, geoms, lay, bars, hmat, card_truth, seed, dev) -> dict:
    ppm = lay.px_per_mm
    w, h = spec.width_px, spec.height_px

    def pt(x_mm, y_mm):
        return _apply_h(hmat, np.array([[x_mm * ppm, y_mm * ppm]]))[0]

    def row_at(x_mm, y_mm):
        return int(np.floor(pt(x_mm, y_mm)[1]))

    tubes = []
    for i, (t, c, g) in enumerate(zip(spec.tubes, contents_list, geoms)):
        ang = np.linspace(0, np.pi, 13)
        outline = [(g.cx - g.R, g.rim), (g.cx + g.R, g.rim), (g.cx - g.R, g.y_hc), (g.cx + g.R, g.y_hc)]
        outline += [(g.cx + g.R * np.cos(a), g.y_hc + g.R * np.sin(a)) for a in ang]
        p = _apply_h(hmat, np.array(outline) * ppm)
        bbox = [int(np.clip(np.floor(p[:, 0].min()), 0, w)), int(np.clip(np.floor(p[:, 1].min()), 0, h)),
                int(np.clip(np.ceil(p[:, 0].max()), 0, w)), int(np.clip(np.ceil(p[:, 1].max()), 0, h))]
        mid_y = g.rim + 0.5 * spec.tube_length_mm
        axis = pt(g.cx, mid_y)
        pellet_mm = c.pellet_mm if t.pellet_mm is None else t.pellet_mm
        has_pellet = g.y_pellet is not None
        tau = 0.0
        liquid = None
        if not c.empty:
            lab, tau = _truth_liquid(c, t, g)
            liquid = {"lab": lab, "colour_name": c.liquid_colour_name, "turbidity": tau}
        state = "empty" if c.empty else ("cloudy" if tau > 0 else ("settled" if has_pellet else "clear"))
        bar = bars[lay.tube_row[i]]
        tubes.append({
            "index": i, "row": lay.tube_row[i], "label": t.label, "contents": c.key,
            "bbox": bbox,
            "axis_col": float(axis[0]),
            "inner_col0": int(np.ceil(pt(g.cx - g.r, mid_y)[0])),
            "inner_col1": int(np.floor(pt(g.cx + g.r, mid_y)[0])),
            "rim_row": row_at(g.cx, g.rim),
            "meniscus_row": None if c.empty else row_at(g.cx, g.y_surface),
            "liquid_top": None if c.empty else row_at(g.cx, g.y_surface + MENISCUS_BAND_MM / 2) + 1,
            "liquid_bottom": row_at(g.cx, g.y_pellet if has_pellet else g.y_inner_bottom),
            "bottom_top": row_at(g.cx, g.y_hc),
            "inner_bottom": row_at(g.cx, g.y_inner_bottom),
            "occluded_rows": None if bar is None else [row_at(g.cx, bar[0]), row_at(g.cx, bar[1]) + 1],
            "state": state,
            "liquid": liquid,
            "lab": None if liquid is None else liquid["lab"],
            "pellet": {"present": bool(has_pellet), "height_mm": float(pellet_mm) if has_pellet else 0.0,
                       "lab": _truth_pellet(c) if has_pellet else None,
                       "colour_name": c.pellet_colour_name if has_pellet else None,
                       "top_row": row_at(g.cx, g.y_pellet) if has_pellet else None},
        })

    card = None
    mm_per_px = None
    if card_truth is not None:
        art = card_truth["art"]
        aff = card_truth["mm_to_px"]
        cw, ch = art.size_mm

        def card_pt(xm, ym):
            return _apply_h(hmat, (aff @ np.array([xm, ym, 1.0]))[None, :])[0]

        corners = [card_pt(0, 0), card_pt(cw, 0), card_pt(cw, ch), card_pt(0, ch)]
        c_mid = card_pt(cw / 2, ch / 2)
        dx = card_pt(cw / 2 + 1.0, ch / 2) - c_mid
        dy = card_pt(cw / 2, ch / 2 + 1.0) - c_mid
        mm_per_px = float(1.0 / np.sqrt(abs(dx[0] * dy[1] - dx[1] * dy[0])))
        card = {
            "kind": art.kind, "size_mm": list(art.size_mm), "art_sha256": art.sha256,
            "corners_px": [[float(v) for v in q] for q in corners],
            "markers": [{"id": int(mid), "corners_px": [[float(v) for v in card_pt(*q)] for q in cs]}
                        for mid, cs in art.markers],
            "patches": [{"id": p.id, "centre_px": [float(v) for v in card_pt(*p.centre_mm)],
                         "nominal_srgb": [float(v) for v in p.nominal_srgb],
                         "lab_d65": [float(v) for v in object_lab_d65(card_truth["spectra"][k])]}
                        for k, p in enumerate(art.patches)],
        }
    if mm_per_px is None:
        o = pt(lay.tube_cx_mm[0], lay.tube_rim_mm[0])
        mm_per_px = float(1.0 / np.linalg.norm(pt(lay.tube_cx_mm[0] + 1.0, lay.tube_rim_mm[0]) - o))
    cam = spec.camera
    return {
        "schema": "tubevision.studio.truth/1",
        "size": [w, h],
        "tubes": tubes,
        "card": card,
        "mm_per_px": mm_per_px,
        "conditions": {
            "illuminant": spec.illuminant, "sensor": cam.sensor, "seed": int(seed),
            "exif_orientation": spec.exif_orientation, "backdrop": spec.backdrop, "band_mm": spec.band_mm,
            "band_shift_mm": float(spec.band_shift_mm),
            "rack": spec.rack, "rows": spec.rows, "scenario": spec.scenario,
            "light_gradient": [float(v) for v in spec.light_gradient],
            "card_angle_deg": float(spec.card_angle_deg),
            "camera": {k: getattr(cam, k) for k in cam.__dataclass_fields__},
            "wb_gains": dev["wb_gains"],
            "homography": [[float(v) for v in r] for r in hmat],
        },
    }
