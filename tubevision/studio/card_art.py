"""The reference card as the studio renders it: printed art plus patch spectra.

With ``card="auto"`` the studio renders the tool's own card
(``tubevision.card.design``: ``card_layout()`` and ``render_card(dpi)``)
when that module is present, else a plain neutral target (white paper, a
black frame and six grey steps, our own design). Printing is modelled
spectrally:

* Each patch gets the smoothest reflectance spectrum in [0, 1] whose D65 colour
  matches its nominal sRGB (least slope squared, Burns 2020; see
  :func:`tubevision.studio.spectra.reflectance_from_srgb`).
* Everything else on the card (paper, markers, text) is a black/white print:
  reflectance 0.04 + (0.85 - 0.04) Y, with Y the linear luminance of the printed
  art (black ink ~0.04, paper ~0.85; from memory).
"""

from __future__ import annotations

import functools
import logging
from dataclasses import dataclass

import numpy as np

from ..colorimetry import srgb_to_linear
from .materials import BACKDROP_DARK_REFLECTANCE, BACKDROP_LIGHT_REFLECTANCE
from .spectra import WAVELENGTHS_NM, reflectance_from_srgb

__all__ = ["CardPatch", "CardArt", "card_art", "card_raw"]

_log = logging.getLogger(__name__)

CARD_ART_DPI = 200
"""Resolution the card art is drawn at before it is scaled into the scene (8 px/mm: finer than
any studio photo's card, so scaling only averages down)."""

PRINT_BLACK_REFLECTANCE = BACKDROP_DARK_REFLECTANCE
"""Reflectance of black print (from memory, ~0.04)."""

PRINT_PAPER_REFLECTANCE = BACKDROP_LIGHT_REFLECTANCE
"""Reflectance of the card's paper (from memory, ~0.85)."""


@dataclass(frozen=True)
class CardPatch:
    """One colour patch: id, centre (x, y) mm from the card's top-left, size (w, h) mm,
    nominal sRGB in [0, 1]."""

    id: str
    centre_mm: tuple[float, float]
    size_mm: tuple[float, float]
    nominal_srgb: tuple[float, float, float]


@dataclass(frozen=True, eq=False)
class CardArt:
    """A card ready to render: kind (``"card"`` or ``"plain"``), size (w, h) mm, printed art
    (uint8 sRGB at ``dpi``), markers (id, 4 corners (x, y) mm), patches."""

    kind: str
    size_mm: tuple[float, float]
    image: np.ndarray
    dpi: float
    markers: tuple[tuple[int, tuple[tuple[float, float], ...]], ...]
    patches: tuple[CardPatch, ...]

    @property
    def sha256(self) -> str:
        """Fingerprint of the art and its patch table (tells when the card design changed)."""
        import hashlib

        h = hashlib.sha256(self.image.tobytes())
        h.update(repr((self.kind, self.size_mm, self.markers, self.patches)).encode())
        return h.hexdigest()


def _plain_target(dpi: float) -> CardArt:
    """Plain neutral target: 90 × 60 mm white card, 2 mm black frame, six 12 mm grey steps."""
    w_mm, h_mm = 90.0, 60.0
    ppm = dpi / 25.4
    img = np.full((int(round(h_mm * ppm)), int(round(w_mm * ppm)), 3), 255, np.uint8)
    f = int(round(2.0 * ppm))
    img[:f] = 0
    img[-f:] = 0
    img[:, :f] = 0
    img[:, -f:] = 0
    patches = []
    for k, v in enumerate((243, 200, 160, 122, 85, 52)):
        cx, cy, s = 13.0 + k * 14.0, 30.0, 12.0
        patches.append(CardPatch(f"N{k + 1}", (cx, cy), (s, s), (v / 255.0,) * 3))
        x0, y0 = int(round((cx - s / 2) * ppm)), int(round((cy - s / 2) * ppm))
        img[y0:y0 + int(round(s * ppm)), x0:x0 + int(round(s * ppm))] = v
    return CardArt("plain", (w_mm, h_mm), img, dpi, (), tuple(patches))


def _g(obj, *names, default=None):
    for n in names:
        if isinstance(obj, dict) and n in obj:
            return obj[n]
        if hasattr(obj, n):
            return getattr(obj, n)
    return default


def _tool_card(dpi: float) -> CardArt | None:
    """The tool's card from ``tubevision.card.design``, or None if it is not there (yet)."""
    try:
        from ..card import design  # type: ignore[attr-defined]
    except ImportError:
        return None
    lay = design.card_layout()
    size = tuple(float(v) for v in _g(lay, "size_mm"))
    markers = []
    for m in _g(lay, "markers", default=()) or ():
        mid = int(_g(m, "id", "marker_id"))
        corners = tuple((float(a), float(b)) for a, b in _g(m, "corners_mm"))
        markers.append((mid, corners))
    patches = []
    for p in _g(lay, "patches", default=()) or ():
        srgb = np.asarray(_g(p, "nominal_srgb", "srgb"), float)
        if srgb.max() > 1.0:
            srgb = srgb / 255.0
        sz = _g(p, "size_mm")
        sz = (float(sz), float(sz)) if np.ndim(sz) == 0 else tuple(float(v) for v in sz)
        patches.append(CardPatch(str(_g(p, "id", "patch_id")), tuple(float(v) for v in _g(p, "centre_mm", "center_mm")),
                                 sz, tuple(float(v) for v in srgb)))
    img = np.asarray(design.render_card(dpi))
    if img.ndim == 2:
        img = np.repeat(img[:, :, None], 3, axis=2)
    return CardArt("card", size, img[:, :, :3].astype(np.uint8), dpi, tuple(markers), tuple(patches))


@functools.lru_cache(maxsize=4)
def card_art(kind: str = "auto") -> CardArt:
    """The card to render: ``"auto"`` (the tool's card if present, else plain) or ``"plain"``."""
    if kind == "auto":
        try:
            art = _tool_card(CARD_ART_DPI)
        except Exception as exc:  # the teammate's module may still be changing: say so, use plain
            _log.warning("studio: cannot render tubevision.card (%s); using the plain target", exc)
            art = None
        if art is not None:
            return art
    return _plain_target(CARD_ART_DPI)


@functools.lru_cache(maxsize=16)
def _patch_spectra(art: CardArt) -> np.ndarray:
    if not art.patches:
        return np.zeros((0, WAVELENGTHS_NM.size))
    out = reflectance_from_srgb(np.array([p.nominal_srgb for p in art.patches]))
    out.setflags(write=False)
    return out


def card_raw(art: CardArt, basis: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Camera raw image of the card at its art resolution, and the patch spectra (N, 81).

    Parameters
    ----------
    art : CardArt.
    basis : ndarray (81, 3) — raw = reflectance @ basis (see :func:`camera.raw_basis`).
    """
    white = np.ones(WAVELENGTHS_NM.size) @ basis
    y = srgb_to_linear(art.image.astype(np.float32) / np.float32(255.0))
    lum = (y @ np.array([0.2126, 0.7152, 0.0722], np.float32))[..., None]
    rho = PRINT_BLACK_REFLECTANCE + (PRINT_PAPER_REFLECTANCE - PRINT_BLACK_REFLECTANCE) * lum
    img = (rho * white.astype(np.float32)[None, None, :]).astype(np.float32)
    spectra = _patch_spectra(art)
    ppm = art.dpi / 25.4
    for p, s in zip(art.patches, spectra):
        rgb = (s @ basis).astype(np.float32)
        (cx, cy), (pw, ph) = p.centre_mm, p.size_mm
        r0, r1 = int(round((cy - ph / 2) * ppm)), int(round((cy + ph / 2) * ppm))
        c0, c1 = int(round((cx - pw / 2) * ppm)), int(round((cx + pw / 2) * ppm))
        img[max(r0, 0):r1, max(c0, 0):c1] = rgb
    return img, spectra
