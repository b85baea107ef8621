"""A phone-like camera: spectra to raw, then the processing a phone applies.

Order of operations (what a phone does, simplified):
optics (perspective is applied by the scene, then blur, vignetting) →
exposure → sensor noise (Poisson-Gaussian) and clipping → white balance →
colour matrix camera→linear sRGB → saturation boost → tone curve and sRGB
encoding → 8-bit → JPEG.

* **Raw values** of a material: raw_c = Σ E(λ) ρ(λ) S_c(λ), normalised so that
  the perfect reflector gives green = 1 before exposure.
* **Automatic white balance, "bright"** (our choice for phones): the white
  patch method: the mean raw colour of the pixels whose green lies between
  the 90th and 99th percentile (the bright paper, without speculars) is taken
  as white (Land & McCann 1971 [1]_ retinex "white patch" idea). ``"grey"`` is
  grey world (Buchsbaum 1980 [2]_). ``"daylight"`` is a fixed D65 preset,
  ``"true"`` uses the illuminant's real white (perfect AWB).
* **Colour matrix**: a 3×3 matrix from white-balanced raw to linear sRGB,
  fitted per sensor under D65 on a patch set by least squares with the
  constraint that white maps to white, as a phone maker would calibrate.
* **Noise**: variance = signal / full_well + (read / full_well)², signal in
  units of full scale (Poisson-Gaussian model, Foi et al. 2008 [3]_).
* **Tone curve**: y' = y - c sin(2π y) / (2π) on the sRGB-encoded value (an S
  curve of strength c, monotone for c < 1; our own simple form).
* **Saturation**: rgb' = Y + s (rgb - Y) in linear light, Y the BT.709 luminance.

References
----------
.. [1] E. H. Land, J. J. McCann, "Lightness and retinex theory", Journal of the
   Optical Society of America 61(1), 1-11, 1971. DOI 10.1364/JOSA.61.000001.
.. [2] G. Buchsbaum, "A spatial processor model for object colour perception",
   Journal of the Franklin Institute 310(1), 1-26, 1980.
   DOI 10.1016/0016-0032(80)90058-7.
.. [3] A. Foi, M. Trimeche, V. Katkovnik, K. Egiazarian, "Practical
   Poissonian-Gaussian noise modeling and fitting for single-image raw-data",
   IEEE Trans. Image Processing 17(10), 1737-1754, 2008. DOI 10.1109/TIP.2008.2001399.
.. [4] ITU-R BT.709-6 (2015), luminance coefficients 0.2126, 0.7152, 0.0722.
.. [5] IEC 61966-2-1:1999 (sRGB), via :mod:`tubevision.colorimetry`.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, replace

import numpy as np

from ..colorimetry import M_XYZ_TO_SRGB, linear_to_srgb
from ..errors import TubevisionInputError
from .spectra import SENSOR_NAMES, WAVELENGTHS_NM, illuminant_spd, object_xyz, sensor_sensitivities

__all__ = ["CameraSpec", "WHITE_BALANCE_METHODS", "raw_basis", "colour_matrix", "develop"]

WHITE_BALANCE_METHODS = ("bright", "grey", "daylight", "true")
"""Automatic white balance choices (see module docstring)."""

LUMA_BT709 = np.array([0.2126, 0.7152, 0.0722])
"""Luminance weights of linear sRGB/BT.709 primaries, ITU-R BT.709-6 [4]_."""

_TONE_LUT_SIZE = 16384
"""Entries of the linear→8-bit lookup table (step 6e-5 in linear light: < 0.25 code
value error near black, where the sRGB curve is steepest)."""


@dataclass(frozen=True)
class CameraSpec:
    """How the phone takes the photo.

    Attributes
    ----------
    sensor : str — one of :data:`tubevision.studio.spectra.SENSOR_NAMES`.
    exposure_ev : float — exposure relative to the perfect white reaching full scale (EV).
    white_balance : str — one of :data:`WHITE_BALANCE_METHODS`.
    tone : float — tone-curve strength c in [0, 0.6] (0 = plain sRGB encoding).
    saturation : float — saturation factor s in [0.5, 2] (1 = none).
    full_well_e : float or None — electrons at full scale; None = noiseless, no raw clipping.
    read_noise_e : float — read noise (electrons, rms).
    blur_px : float — Gaussian optical blur sigma (pixels); 0 = sharp.
    vignetting : float — relative fall-off k at the corners: gain 1 - k r², r = 1 at a corner.
    jpeg_quality : int or None — JPEG quality 1-100, None = no compression.
    perspective : float — largest corner shift of the homography, as a fraction of the width.
    """

    sensor: str = "phone-a"
    exposure_ev: float = -0.15
    white_balance: str = "bright"
    tone: float = 0.18
    saturation: float = 1.15
    full_well_e: float | None = 8000.0
    read_noise_e: float = 3.0
    blur_px: float = 0.7
    vignetting: float = 0.15
    jpeg_quality: int | None = 90
    perspective: float = 0.02

    def __post_init__(self) -> None:
        if self.sensor not in SENSOR_NAMES:
            raise TubevisionInputError(f"camera sensor {self.sensor!r}: choose one of {', '.join(SENSOR_NAMES)}")
        if self.white_balance not in WHITE_BALANCE_METHODS:
            raise TubevisionInputError(
                f"white_balance {self.white_balance!r}: choose one of {', '.join(WHITE_BALANCE_METHODS)}")
        if not 0.0 <= self.tone <= 0.6:
            raise TubevisionInputError(f"tone {self.tone}: give 0-0.6")
        if not 0.5 <= self.saturation <= 2.0:
            raise TubevisionInputError(f"saturation {self.saturation}: give 0.5-2")
        if self.jpeg_quality is not None and not 1 <= int(self.jpeg_quality) <= 100:
            raise TubevisionInputError(f"jpeg_quality {self.jpeg_quality}: give 1-100 or None")
        if not 0.0 <= self.perspective <= 0.1:
            raise TubevisionInputError(f"perspective {self.perspective}: give 0-0.1")
        if self.blur_px < 0 or not 0.0 <= self.vignetting < 1.0:
            raise TubevisionInputError("blur_px must be ≥ 0 and vignetting in [0, 1)")

    @classmethod
    def ideal(cls) -> "CameraSpec":
        """A colorimetric, linear, noiseless camera: CIE 1931 CMFs as sensitivities, daylight
        white balance, no tone curve, no saturation boost, no blur, no JPEG, no perspective."""
        return cls(sensor="ideal-cmf", exposure_ev=0.0, white_balance="daylight", tone=0.0,
                   saturation=1.0, full_well_e=None, blur_px=0.0, vignetting=0.0,
                   jpeg_quality=None, perspective=0.0)

    def with_(self, **changes) -> "CameraSpec":
        """A copy with some fields changed."""
        return replace(self, **changes)


def raw_basis(sensor: str, illuminant: str) -> np.ndarray:
    """Matrix W (81, 3) with raw = ρ @ W; the perfect reflector gives green = 1."""
    w = illuminant_spd(illuminant)[:, None] * sensor_sensitivities(sensor)
    return w / w[:, 1].sum()


def _patch_set() -> np.ndarray:
    """Smooth reflectances for fitting the colour matrix (invented): greys and hue bumps/edges."""
    lam = WAVELENGTHS_NM
    out = [np.full(lam.size, v) for v in (0.05, 0.2, 0.45, 0.8)]
    for c in range(420, 701, 20):
        out.append(0.08 + 0.7 * np.exp(-0.5 * ((lam - c) / 35.0) ** 2))
        out.append(0.85 - 0.7 * np.exp(-0.5 * ((lam - c) / 45.0) ** 2))
    for e in range(460, 661, 40):
        out.append(0.06 + 0.8 / (1.0 + np.exp(-(lam - e) / 15.0)))
        out.append(0.06 + 0.8 / (1.0 + np.exp((lam - e) / 15.0)))
    return np.array(out)


@functools.lru_cache(maxsize=None)
def colour_matrix(sensor: str) -> np.ndarray:
    """The sensor's 3×3 matrix from white-balanced raw to linear sRGB, fitted under D65.

    Least squares over :func:`_patch_set`, each row constrained so that raw white
    (1, 1, 1) maps to sRGB white (1, 1, 1) (Lagrange-multiplier solution of the
    equality-constrained least-squares problem, common practice).
    """
    patches = _patch_set()
    raw = patches @ raw_basis(sensor, "D65")
    white = np.ones(WAVELENGTHS_NM.size) @ raw_basis(sensor, "D65")
    x = raw / white
    xyz = object_xyz(patches, illuminant_spd("D65"))
    xyz_w = object_xyz(np.ones(WAVELENGTHS_NM.size), illuminant_spd("D65"))
    target = xyz @ M_XYZ_TO_SRGB.T / (xyz_w @ M_XYZ_TO_SRGB.T)
    xtx_inv = np.linalg.inv(x.T @ x)
    one = np.ones(3)
    m = np.empty((3, 3))
    for i in range(3):
        m0 = xtx_inv @ x.T @ target[:, i]
        lam = (1.0 - one @ m0) / (one @ xtx_inv @ one)
        m[i] = m0 + lam * (xtx_inv @ one)
    m.setflags(write=False)
    return m


def _white_gains(raw: np.ndarray, camera: CameraSpec, illuminant: str) -> np.ndarray:
    if camera.white_balance == "true":
        white = np.ones(WAVELENGTHS_NM.size) @ raw_basis(camera.sensor, illuminant)
    elif camera.white_balance == "daylight":
        white = np.ones(WAVELENGTHS_NM.size) @ raw_basis(camera.sensor, "D65")
    else:
        sub = raw[::7, ::7].reshape(-1, 3).astype(np.float64)
        if camera.white_balance == "grey":
            white = sub.mean(axis=0)
        else:
            g = sub[:, 1]
            lo, hi = np.percentile(g, [90.0, 99.0])
            sel = (g >= lo) & (g <= hi)
            white = sub[sel].mean(axis=0) if sel.any() else sub.mean(axis=0)
    white = np.maximum(white, 1e-6)
    return white[1] / white


@functools.lru_cache(maxsize=32)
def _tone_lut(tone: float) -> np.ndarray:
    x = np.linspace(0.0, 1.0, _TONE_LUT_SIZE)
    y = linear_to_srgb(x)
    y = y - tone * np.sin(2.0 * np.pi * y) / (2.0 * np.pi)
    return np.clip(np.rint(y * 255.0), 0, 255).astype(np.uint8)


def develop(raw: np.ndarray, camera: CameraSpec, illuminant: str, rng: np.random.Generator) -> tuple[np.ndarray, dict]:
    """Turn an exposed-to-be raw image into 8-bit sRGB the way the phone would.

    Parameters
    ----------
    raw : ndarray (H, W, 3) float32 — scene raw values (perfect white green = 1), after
        perspective; modified in place.
    camera : CameraSpec.
    illuminant : str — the scene's illuminant (used by ``white_balance="true"``).
    rng : numpy Generator — noise source.

    Returns
    -------
    (uint8 (H, W, 3) sRGB-encoded, dict of the settings applied: gains, matrix, exposure).
    """
    import cv2

    h, w = raw.shape[:2]
    if camera.blur_px > 0:
        cv2.GaussianBlur(raw, (0, 0), camera.blur_px, dst=raw, borderType=cv2.BORDER_REPLICATE)
    gain = np.float32(2.0 ** camera.exposure_ev)
    if camera.vignetting > 0:
        yy = (np.arange(h, dtype=np.float32) - (h - 1) / 2) / (0.5 * np.hypot(h, w))
        xx = (np.arange(w, dtype=np.float32) - (w - 1) / 2) / (0.5 * np.hypot(h, w))
        v = (1.0 - camera.vignetting * (yy[:, None] ** 2 + xx[None, :] ** 2)).astype(np.float32) * gain
        raw *= v[:, :, None]
    else:
        raw *= gain
    if camera.full_well_e is not None:
        fw = np.float32(camera.full_well_e)
        sd = np.sqrt(np.maximum(raw, 0.0) / fw + np.float32((camera.read_noise_e / camera.full_well_e) ** 2))
        raw += sd * rng.standard_normal(raw.shape, dtype=np.float32)
        np.clip(raw, 0.0, 1.0, out=raw)
    gains = _white_gains(raw, camera, illuminant)
    m = colour_matrix(camera.sensor) * gains[None, :]
    if camera.saturation != 1.0:
        s = camera.saturation
        sat = s * np.eye(3) + (1.0 - s) * np.outer(np.ones(3), LUMA_BT709)
        m = sat @ m
    rgb = cv2.transform(raw, m.astype(np.float32))
    lut = _tone_lut(round(camera.tone, 4))
    idx = np.clip(rgb * np.float32(_TONE_LUT_SIZE - 1) + np.float32(0.5), 0, _TONE_LUT_SIZE - 1).astype(np.int32)
    out = lut[idx]
    return out, {"wb_gains": [float(g) for g in gains], "exposure_ev": camera.exposure_ev,
                 "colour_matrix": [[float(v) for v in row] for row in colour_matrix(camera.sensor)]}
