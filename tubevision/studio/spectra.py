"""Spectral data and object-colour sums for the studio (numpy only at import).

All spectra in the studio live on one wavelength grid,
:data:`WAVELENGTHS_NM` (380-780 nm at 5 nm, 81 bands). The published tables
are read from CSV copies in ``tubevision/data/spectra/`` (made once by
``tools/extract_spectra.py`` from colour-science 0.4.7; each file's header
names the original publication and units).

References
----------
.. [1] CIE 015:2018, Colorimetry, 4th edition. CIE, Vienna.
   DOI 10.25039/TR.015.2018. Eq. 7.1-7.3 (tristimulus sums, k for Y = 1 of
   the perfect reflecting diffuser), Table 5/6/10.1/10.4 (data), Sec. 7.1
   (5 nm sampling), Annex (Planck's law, c2 = 1.4388e-2 m K).
.. [2] M. Planck, "Ueber das Gesetz der Energieverteilung im Normalspectrum",
   Annalen der Physik 309(3), 553-563, 1901. DOI 10.1002/andp.19013090310.
.. [3] S. A. Burns, "Numerical methods for smoothest reflectance
   reconstruction", Color Research & Application 45(1), 8-21, 2020.
   DOI 10.1002/col.22437 (least slope squared, LSS, with bounds [0, 1]).
.. [4] J. Jiang, D. Liu, J. Gu, S. Süsstrunk, "What is the space of spectral
   sensitivity functions for digital color cameras?", IEEE WACV 2013,
   168-179. DOI 10.1109/WACV.2013.6475015 (shapes of camera sensitivities;
   the Gaussian phone sets below are from memory, not fitted to it).
"""

from __future__ import annotations

import functools
from pathlib import Path

import numpy as np

from ..colorimetry import WHITE_D65, xyz_to_lab
from ..errors import TubevisionInputError

__all__ = [
    "WAVELENGTHS_NM",
    "ILLUMINANT_NAMES",
    "SENSOR_NAMES",
    "cmfs",
    "illuminant_spd",
    "planck_spd",
    "sensor_sensitivities",
    "object_xyz",
    "object_lab_d65",
    "reflectance_from_srgb",
]

WAVELENGTHS_NM = np.arange(380.0, 781.0, 5.0)
"""Working wavelength grid (nm): 380-780 nm at 5 nm, 81 bands, as CIE 015:2018 [1]_
Sec. 7.1 recommends for colorimetric sums (covers the 31-band 400-700 nm grid)."""

C2_M_K = 1.4388e-2
"""Second radiation constant c2 (m K), the value CIE 015:2018 [1]_ prescribes for Planckian
radiators (the exact CODATA value 1.438776877e-2 would move x, y by < 1e-5)."""

ILLUMINANT_NAMES = ("A", "D50", "D65", "FL2", "FL11", "LED-B3", "LED-RGB1")
"""Tabulated illuminants (CIE 015:2018 [1]_ Tables 5, 10.1, 10.4). Planckian radiators are
named ``"planck-<T>"`` with T in kelvin, e.g. ``"planck-2700"``, computed by Planck's law."""

_SPECTRA_DIR = Path(__file__).resolve().parent.parent / "data" / "spectra"
"""Folder of the CSV tables (made by tools/extract_spectra.py)."""

_SENSOR_FILES = {
    "nikon5100-npl": "camera_nikon5100_npl.csv",
    "sigma-sdmerill-npl": "camera_sigma_sdmerill_npl.csv",
}

_GAUSSIAN_SENSORS = {
    # name: ((centre nm, sigma nm) for R, G, B), IR-cut edge nm.  From memory: typical
    # smartphone CMOS sensors peak near 595-610 / 530-540 / 455-465 nm, with an IR-cut
    # filter near 650 nm (cf. the measured shapes in Jiang et al. 2013 [4]_).
    "phone-a": (((600.0, 32.0), (535.0, 38.0), (460.0, 26.0)), 655.0),
    "phone-b": (((610.0, 38.0), (530.0, 44.0), (455.0, 30.0)), 665.0),
    "phone-c": (((592.0, 28.0), (540.0, 34.0), (465.0, 24.0)), 645.0),
}

SENSOR_NAMES = ("ideal-cmf", *_SENSOR_FILES, *_GAUSSIAN_SENSORS)
"""Camera sensors: ``ideal-cmf`` (the CIE 1931 2° CMFs, a colorimetric camera), the two NPL
measured sets, and three parametric Gaussian phone sensors (from memory)."""


def _read_table(name: str) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    text = (_SPECTRA_DIR / name).read_text(encoding="utf-8")
    lines = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    header = lines[0].split(",")
    data = np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]])
    return data[:, 0], {h: data[:, i] for i, h in enumerate(header) if i}


def _on_grid(wl: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Linear interpolation onto :data:`WAVELENGTHS_NM`; zero outside the table's range."""
    return np.interp(WAVELENGTHS_NM, wl, values, left=0.0, right=0.0)


@functools.lru_cache(maxsize=None)
def _cmfs_cached() -> np.ndarray:
    wl, cols = _read_table("cie1931_2deg_cmfs.csv")
    out = np.column_stack([_on_grid(wl, cols[k]) for k in ("xbar", "ybar", "zbar")])
    out.setflags(write=False)
    return out


def cmfs() -> np.ndarray:
    """CIE 1931 2° colour-matching functions on the working grid.

    Returns
    -------
    ndarray of shape (81, 3) — xbar, ybar, zbar (CIE 015:2018 [1]_ Table 6), read-only.
    """
    return _cmfs_cached()


def planck_spd(temperature_k: float) -> np.ndarray:
    """Relative spectral power of a Planckian radiator, 100 at 560 nm.

    Parameters
    ----------
    temperature_k : float — colour temperature in kelvin, 1000-25000.

    Returns
    -------
    ndarray of shape (81,) on :data:`WAVELENGTHS_NM`.

    References
    ----------
    Planck (1901) [2]_; spectral radiant exitance M(λ) ∝ λ^-5 / (exp(c2 / λT) - 1) with
    c2 as CIE 015:2018 [1]_ prescribes (:data:`C2_M_K`).

    Examples
    --------
    >>> s = planck_spd(2856.0)
    >>> round(float(s[WAVELENGTHS_NM == 560][0]), 6)
    100.0
    """
    t = float(temperature_k)
    if not 1000.0 <= t <= 25000.0:
        raise TubevisionInputError(f"Planckian temperature {t:g} K: give 1000-25000 K")
    lam_m = WAVELENGTHS_NM * 1e-9
    m = lam_m ** -5 / np.expm1(C2_M_K / (lam_m * t))
    m560 = (560e-9) ** -5 / np.expm1(C2_M_K / (560e-9 * t))
    return 100.0 * m / m560


@functools.lru_cache(maxsize=64)
def _illuminant_cached(name: str) -> np.ndarray:
    if name.lower().startswith("planck-"):
        try:
            t = float(name.split("-", 1)[1])
        except ValueError:
            raise TubevisionInputError(f"illuminant {name!r}: write planck-<kelvin>, e.g. planck-3200") from None
        out = planck_spd(t)
    else:
        if name not in ILLUMINANT_NAMES:
            raise TubevisionInputError(
                f"unknown illuminant {name!r}: choose one of {', '.join(ILLUMINANT_NAMES)} or planck-<kelvin>")
        wl, cols = _read_table("cie_illuminants.csv")
        out = _on_grid(wl, cols[name])
    out.setflags(write=False)
    return out


def illuminant_spd(name: str) -> np.ndarray:
    """Relative spectral power of an illuminant on the working grid.

    Parameters
    ----------
    name : str — one of :data:`ILLUMINANT_NAMES` or ``"planck-<T>"`` (kelvin).

    Returns
    -------
    ndarray of shape (81,), read-only (CIE normalisation for tables, 100 at 560 nm for Planck).

    Raises
    ------
    TubevisionInputError — unknown name.
    """
    return _illuminant_cached(str(name))


@functools.lru_cache(maxsize=None)
def _sensor_cached(name: str) -> np.ndarray:
    if name == "ideal-cmf":
        out = np.array(_cmfs_cached())
    elif name in _SENSOR_FILES:
        wl, cols = _read_table(_SENSOR_FILES[name])
        out = np.column_stack([_on_grid(wl, cols[k]) for k in ("red", "green", "blue")])
    elif name in _GAUSSIAN_SENSORS:
        peaks, ir_cut = _GAUSSIAN_SENSORS[name]
        lam = WAVELENGTHS_NM
        # IR-cut filter as a logistic edge 10 nm wide (from memory, typical hot-mirror filters).
        cut = 1.0 / (1.0 + np.exp((lam - ir_cut) / 10.0))
        out = np.column_stack([np.exp(-0.5 * ((lam - c) / s) ** 2) * cut for c, s in peaks])
    else:
        raise TubevisionInputError(f"unknown camera sensor {name!r}: choose one of {', '.join(SENSOR_NAMES)}")
    out.setflags(write=False)
    return out


def sensor_sensitivities(name: str) -> np.ndarray:
    """Spectral sensitivities of a camera sensor on the working grid.

    Returns
    -------
    ndarray of shape (81, 3) — R, G, B relative sensitivities, read-only.
    """
    return _sensor_cached(str(name))


def object_xyz(reflectance: np.ndarray, illuminant: np.ndarray) -> np.ndarray:
    """CIE XYZ of an object colour, Y = 1 for the perfect reflecting diffuser.

    Parameters
    ----------
    reflectance : ndarray of shape (..., 81) — spectral reflectance (or transmittance) factor.
    illuminant : ndarray of shape (81,) — relative spectral power.

    Returns
    -------
    ndarray of shape (..., 3) — XYZ, 2° observer.

    References
    ----------
    CIE 015:2018 [1]_ eq. 7.1-7.3: X = k Σ S(λ) R(λ) xbar(λ) Δλ, k = 1 / Σ S(λ) ybar(λ) Δλ
    (here scaled so that Y of the perfect reflector is 1, not 100).
    """
    w = np.asarray(illuminant, dtype=float)[:, None] * cmfs()
    w = w / w[:, 1].sum()
    return np.asarray(reflectance, dtype=float) @ w


def object_lab_d65(reflectance: np.ndarray) -> np.ndarray:
    """CIELAB (D65, 2°) of an object colour, computed spectrally under CIE D65.

    The reference white is :data:`tubevision.colorimetry.WHITE_D65`, the contract's white;
    the perfect reflector's own sum differs from it by < 1e-4 in X and Z.

    Examples
    --------
    >>> lab = object_lab_d65(np.ones(81))
    >>> bool(abs(lab[0] - 100.0) < 0.01 and abs(lab[1]) < 0.05 and abs(lab[2]) < 0.05)
    True
    """
    return xyz_to_lab(object_xyz(reflectance, illuminant_spd("D65")), WHITE_D65)


def reflectance_from_srgb(srgb: np.ndarray) -> np.ndarray:
    """Smoothest reflectance spectra in [0, 1] matching sRGB colours under D65.

    Parameters
    ----------
    srgb : ndarray of shape (N, 3) or (3,) — sRGB-encoded values in [0, 1] (IEC 61966-2-1).

    Returns
    -------
    ndarray of shape (N, 81) or (81,) — reflectance factors in [0, 1].

    Notes
    -----
    Least slope squared (LSS) with bounds, after Burns (2020) [3]_: minimise
    Σ (ρ[i+1] - ρ[i])² subject to the D65 / 2° tristimulus values of ρ equalling the
    target's (here as a heavily weighted penalty, weight 1e4 on XYZ with Y = 1) and
    0 ≤ ρ ≤ 1, solved by bounded linear least squares (``scipy.optimize.lsq_linear``).
    Targets outside what a reflectance can reach (very saturated sRGB) come out as the
    closest reachable spectrum, so their colour differs a little from nominal.
    """
    from scipy.optimize import lsq_linear

    from ..colorimetry import linear_srgb_to_xyz, srgb_to_linear

    arr = np.atleast_2d(np.asarray(srgb, dtype=float))
    xyz = linear_srgb_to_xyz(srgb_to_linear(np.clip(arr, 0.0, 1.0)))
    n = WAVELENGTHS_NM.size
    w = illuminant_spd("D65")[:, None] * cmfs()
    a_mat = (w / w[:, 1].sum()).T                      # (3, 81)
    d_mat = np.diff(np.eye(n), axis=0)                  # (80, 81) first differences
    weight = 100.0                                      # sqrt of the 1e4 penalty weight
    big = np.vstack([d_mat, weight * a_mat])
    out = np.empty((arr.shape[0], n))
    for i, t in enumerate(xyz):
        rhs = np.concatenate([np.zeros(n - 1), weight * t])
        out[i] = lsq_linear(big, rhs, bounds=(0.0, 1.0), method="bvls").x
    return out[0] if np.ndim(srgb) == 1 else out
