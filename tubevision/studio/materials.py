"""What is in the tubes: absorbing solutions, scattering suspensions, settled solids.

Every spectrum here is **invented and representative, not measured**: Gaussian
absorption bands with stated centres and widths, and smooth reflectance
curves, shaped after what a bench chemist sees (a chromate-like yellow band
near 370-450 nm, a deep-blue copper-ammine-like band near 600 nm, ...).

Optical model of a liquid column of path length L (mm) at one wavelength:

* Dissolved absorber: decadic absorbance per mm a(λ) (Beer-Lambert law [1]_),
  so the directly transmitted fraction is 10^(-a L).
* Suspended solid: scattering coefficient σ (1/mm) with σ(λ) = σ550 (550/λ)^0.5
  (a weak wavelength dependence for particles larger than the wavelength;
  exponent from memory), and particle absorption K_p from the solid's own
  reflectance R∞ through the Kubelka-Munk relation K/S = (1 - R∞)² / (2 R∞) [2]_,
  taking the KM S equal to σ (our modelling choice).
* Seen through the tube, the backdrop is dimmed by the total extinction:
  T = 10^(-a L) exp(-(σ + K_p / 2) L)  (K ≈ 2α for diffuse light [3]_).
* The suspension also sends front light back: the veil R_v, the two-flux
  Kubelka-Munk reflectance of a slab of thickness L over black [3]_ with
  K = 2 ln(10) a + K_p and S = σ.
* Apparent reflectance factor over a backdrop of reflectance R_b:
  ``g (T R_b + R_v)``, with g the glass factor
  (:data:`GLASS_FACTOR_FILLED`). The backdrop behind a thin tube is lit by the
  room around the tube, so light crosses the liquid once (our simplification).

The studio's turbidity truth is τ = σ(550 nm) × inner diameter: the scattering
optical depth across the tube on its axis (dimensionless; 0 for a clear liquid).

References
----------
.. [1] IUPAC Compendium of Chemical Terminology (Gold Book), "Beer-Lambert law",
   DOI 10.1351/goldbook.B00626: A = ε c l, transmittance 10^-A.
.. [2] P. Kubelka, F. Munk, "Ein Beitrag zur Optik der Farbanstriche",
   Zeitschrift für technische Physik 12, 593-601, 1931 (K/S = (1-R∞)²/2R∞).
.. [3] P. Kubelka, "New contributions to the optics of intensely light-scattering
   materials. Part I", Journal of the Optical Society of America 38(5), 448-457,
   1948. DOI 10.1364/JOSA.38.000448 (hyperbolic solution: R = sinh(bSX) /
   (a sinh(bSX) + b cosh(bSX)), a = (S+K)/S, b = sqrt(a² - 1)).
.. [4] E. Hecht, Optics, 5th ed., Pearson 2017, Sec. 4.6 (Fresnel reflectance at
   normal incidence ((n-1)/(n+1))² ≈ 4 % for glass, n = 1.5).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TubevisionInputError
from .spectra import WAVELENGTHS_NM

__all__ = [
    "GLASS_FACTOR_FILLED",
    "GLASS_FACTOR_EMPTY",
    "BACKDROP_LIGHT_REFLECTANCE",
    "BACKDROP_DARK_REFLECTANCE",
    "Contents",
    "CONTENTS",
    "SOLUTES",
    "SOLIDS",
    "solute_absorbance_per_mm",
    "solid_reflectance",
    "beer_lambert_transmittance",
    "km_slab_reflectance",
    "liquid_optics",
    "contents",
]

GLASS_FACTOR_FILLED = 0.92
"""Transmittance of the glass of a filled tube along the line of sight: two air-glass
surfaces at ≈ 4 % each (Fresnel, n = 1.5, Hecht [4]_); glass-water surfaces reflect < 0.5 %."""

GLASS_FACTOR_EMPTY = 0.85
"""Transmittance of an empty tube: four air-glass surfaces, 0.96^4 (Hecht [4]_)."""

BACKDROP_LIGHT_REFLECTANCE = 0.85
"""Reflectance of unprinted white paper, spectrally flat (from memory: office paper 0.8-0.9)."""

BACKDROP_DARK_REFLECTANCE = 0.04
"""Reflectance of full black print (from memory, ~4 %; the figure tubevision.backdrop uses)."""

SCATTER_EXPONENT = 0.5
"""σ(λ) ∝ λ^-0.5 for the suspensions (from memory: particles of a few µm scatter with a
weak wavelength dependence, between 0 for large and 4 for Rayleigh particles)."""


def _gauss(centre_nm: float, sigma_nm: float) -> np.ndarray:
    return np.exp(-0.5 * ((WAVELENGTHS_NM - centre_nm) / sigma_nm) ** 2)


def _logistic(edge_nm: float, width_nm: float) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-(WAVELENGTHS_NM - edge_nm) / width_nm))


SOLUTES: dict[str, tuple[tuple[float, float, float], ...]] = {
    # name: Gaussian bands (centre nm, sigma nm, peak decadic absorbance per mm at strength 1).
    # Invented, representative shapes (not measured spectra).
    "chromate-like": ((375.0, 50.0, 0.20),),
    "dichromate-like": ((350.0, 50.0, 0.40), (445.0, 48.0, 0.70)),
    "thiocyanato-iron-like": ((495.0, 55.0, 0.20),),
    "copper-ammine-like": ((610.0, 70.0, 0.06),),
    "nickel-aqua-like": ((395.0, 30.0, 0.06), (690.0, 60.0, 0.05)),
    "cobalt-aqua-like": ((512.0, 30.0, 0.035),),
}
"""Dissolved absorbers: Gaussian absorption bands, invented/representative."""


def _solid_table() -> dict[str, np.ndarray]:
    lam = WAVELENGTHS_NM
    return {
        # Invented, representative reflectance curves of settled solids (R∞, opaque layer).
        "white": 0.88 - 0.06 * np.exp(-(lam - 380.0) / 40.0),
        "yellow": 0.06 + 0.74 * _logistic(510.0, 12.0),
        "grey-black": 0.025 + 0.008 * (lam - 380.0) / 400.0,
        "red-brown": 0.05 + 0.40 * _logistic(590.0, 25.0),
        "pink": 0.78 - 0.48 * _gauss(525.0, 40.0) - 0.30 * _gauss(450.0, 35.0),
        "blue-green": 0.10 + 0.45 * _gauss(500.0, 45.0),
    }


SOLIDS: dict[str, np.ndarray] = _solid_table()
"""Settled / suspended solids: reflectance R∞ (81 bands), invented/representative."""


@dataclass(frozen=True)
class Contents:
    """A named kind of tube contents, with its default amounts and the words for it.

    Attributes
    ----------
    key : str — library name.
    description : str — what it stands for (invented, representative).
    solute : str | None — key in :data:`SOLUTES`, or None for a colourless liquid.
    solute_strength : float — scale of the solute's absorbance (1 = as tabulated).
    solid : str | None — key in :data:`SOLIDS` for the suspended and/or settled solid.
    turbidity : float — τ, scattering optical depth across the inner diameter at 550 nm.
    pellet_mm : float — default height of settled solid on the axis (mm).
    liquid_colour_name, pellet_colour_name : contract colour words (None where absent).
    empty : bool — no liquid at all.
    """

    key: str
    description: str
    solute: str | None = None
    solute_strength: float = 1.0
    solid: str | None = None
    turbidity: float = 0.0
    pellet_mm: float = 0.0
    liquid_colour_name: str | None = "colourless"
    pellet_colour_name: str | None = None
    empty: bool = False


CONTENTS: dict[str, Contents] = {c.key: c for c in (
    Contents("empty", "an empty, dry tube", liquid_colour_name=None, empty=True),
    Contents("water", "colourless clear water"),
    Contents("yellow-solution", "yellow solution, chromate-like band 370-450 nm",
             solute="chromate-like", liquid_colour_name="yellow"),
    Contents("orange-solution", "orange solution, dichromate-like", solute="dichromate-like",
             liquid_colour_name="orange"),
    Contents("red-solution", "blood-red solution, thiocyanato-iron-like band near 495 nm",
             solute="thiocyanato-iron-like", liquid_colour_name="red"),
    Contents("blue-solution", "deep-blue solution, copper-ammine-like band near 610 nm",
             solute="copper-ammine-like", liquid_colour_name="blue"),
    Contents("green-solution", "green solution, nickel-aqua-like bands at 395 and 690 nm",
             solute="nickel-aqua-like", liquid_colour_name="green"),
    Contents("pink-solution", "pale pink solution, cobalt-aqua-like band near 512 nm",
             solute="cobalt-aqua-like", liquid_colour_name="pink"),
    Contents("white-precipitate", "white solid settled under clear liquid", solid="white",
             pellet_mm=3.0, pellet_colour_name="white"),
    Contents("yellow-precipitate", "yellow solid settled under clear liquid", solid="yellow",
             pellet_mm=3.0, pellet_colour_name="yellow"),
    Contents("black-precipitate", "grey-black solid settled under clear liquid", solid="grey-black",
             pellet_mm=2.5, pellet_colour_name="black"),
    Contents("brown-precipitate", "red-brown solid settled under clear liquid", solid="red-brown",
             pellet_mm=4.0, pellet_colour_name="brown"),
    Contents("pink-precipitate", "pink-red solid settled under clear liquid", solid="pink",
             pellet_mm=3.0, pellet_colour_name="pink"),
    # A cloudy liquid is named by the light its solid scatters: "faint white turbidity", not
    # "colourless", which the contract keeps for a clear liquid (shared/contract.md vocabulary).
    Contents("faint-cloud", "faint white turbidity, no settled solid", solid="white",
             turbidity=0.4, liquid_colour_name="white"),
    Contents("white-cloud", "white suspension (cloudy)", solid="white", turbidity=2.0,
             liquid_colour_name="white"),
    Contents("milky", "heavy white suspension (milky)", solid="white", turbidity=8.0,
             liquid_colour_name="white"),
    Contents("white-cloud-settling", "white suspension with some solid already settled",
             solid="white", turbidity=1.2, pellet_mm=2.0, liquid_colour_name="white",
             pellet_colour_name="white"),
    Contents("yellow-cloud", "yellow suspension", solid="yellow", turbidity=2.5,
             liquid_colour_name="yellow"),
    Contents("brown-cloud", "red-brown suspension", solid="red-brown", turbidity=3.0,
             liquid_colour_name="brown"),
)}
"""The contents library (invented, representative), by key."""


def contents(key: str) -> Contents:
    """Look up a :class:`Contents` by key; raises TubevisionInputError listing the keys."""
    try:
        return CONTENTS[key]
    except KeyError:
        raise TubevisionInputError(
            f"unknown tube contents {key!r}: choose one of {', '.join(CONTENTS)}") from None


def solute_absorbance_per_mm(solute: str | None, strength: float = 1.0) -> np.ndarray:
    """Decadic absorbance per mm of a dissolved absorber, shape (81,); zeros for None."""
    if solute is None:
        return np.zeros(WAVELENGTHS_NM.size)
    if solute not in SOLUTES:
        raise TubevisionInputError(f"unknown solute {solute!r}: choose one of {', '.join(SOLUTES)}")
    return strength * sum(p * _gauss(c, s) for c, s, p in SOLUTES[solute])


def solid_reflectance(solid: str) -> np.ndarray:
    """Reflectance R∞ of a solid, shape (81,)."""
    if solid not in SOLIDS:
        raise TubevisionInputError(f"unknown solid {solid!r}: choose one of {', '.join(SOLIDS)}")
    return SOLIDS[solid]


def beer_lambert_transmittance(absorbance_per_mm: np.ndarray, path_mm: np.ndarray) -> np.ndarray:
    """Directly transmitted fraction 10^(-a L) (Beer-Lambert law, IUPAC Gold Book [1]_).

    Parameters
    ----------
    absorbance_per_mm : ndarray (..., 81) — decadic absorbance per mm.
    path_mm : ndarray broadcastable — path length in mm.

    Examples
    --------
    >>> float(beer_lambert_transmittance(np.array(0.5), np.array(2.0)))
    0.1
    """
    return 10.0 ** (-np.asarray(absorbance_per_mm) * np.asarray(path_mm))


def km_slab_reflectance(k_per_mm: np.ndarray, s_per_mm: np.ndarray, thickness_mm: np.ndarray) -> np.ndarray:
    """Two-flux Kubelka-Munk reflectance of a slab over a black background.

    Parameters
    ----------
    k_per_mm, s_per_mm : ndarray — KM absorption and scattering coefficients (1/mm), S ≥ 0.
    thickness_mm : ndarray — slab thickness X (mm). All broadcast together.

    Returns
    -------
    ndarray — R in [0, 1); 0 where S = 0.

    References
    ----------
    Kubelka (1948) [3]_, hyperbolic solution with R_g = 0: R = sinh(bSX) / (a sinh(bSX) + b cosh(bSX)),
    a = (S + K) / S, b = sqrt(a² - 1). For K = 0 it reduces to SX / (1 + SX).

    Examples
    --------
    >>> round(float(km_slab_reflectance(np.array(0.0), np.array(1.0), np.array(1.0))), 6)
    0.5
    """
    k, s, x = np.broadcast_arrays(np.asarray(k_per_mm, float), np.asarray(s_per_mm, float),
                                  np.asarray(thickness_mm, float))
    out = np.zeros(k.shape)
    pos = s > 0
    k, s, x = k[pos], s[pos], x[pos]
    sx = s * x
    a = (s + k) / s
    b = np.sqrt(np.maximum(a * a - 1.0, 0.0))
    small_b = b < 1e-6
    bsx = np.minimum(b * sx, 50.0)   # sinh/cosh ratio is 1 to double precision beyond this
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.sinh(bsx) / (a * np.sinh(bsx) + b * np.cosh(bsx))
    r = np.where(small_b, sx / (1.0 + sx), r)
    out[pos] = r
    return out


def liquid_optics(spec_contents: Contents, *, strength: float | None = None,
                  turbidity: float | None = None, inner_diameter_mm: float,
                  path_mm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Direct transmittance T and veil reflectance R_v of a liquid column.

    Parameters
    ----------
    spec_contents : Contents — what is in the tube (not empty).
    strength : float, optional — solute strength; default the contents' own.
    turbidity : float, optional — τ (see module docstring); default the contents' own.
    inner_diameter_mm : float — inner diameter d of the tube (σ550 = τ / d).
    path_mm : ndarray of shape (M,) — path lengths L through the liquid (mm).

    Returns
    -------
    (T, R_v) : two ndarrays of shape (M, 81) — see the module docstring for the model.
    """
    c = spec_contents
    a = solute_absorbance_per_mm(c.solute, c.solute_strength if strength is None else strength)
    tau = c.turbidity if turbidity is None else turbidity
    path = np.asarray(path_mm, float)[:, None]
    if tau > 0 and c.solid is not None:
        sigma = (tau / inner_diameter_mm) * (550.0 / WAVELENGTHS_NM) ** SCATTER_EXPONENT
        r_inf = solid_reflectance(c.solid)
        k_p = sigma * (1.0 - r_inf) ** 2 / (2.0 * r_inf)
    else:
        sigma = np.zeros(WAVELENGTHS_NM.size)
        k_p = np.zeros(WAVELENGTHS_NM.size)
    t = beer_lambert_transmittance(a, path) * np.exp(-(sigma + 0.5 * k_p) * path)
    r_v = km_slab_reflectance(2.0 * np.log(10.0) * a + k_p, sigma, path)
    return t, r_v
