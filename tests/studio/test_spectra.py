"""Studio spectral data and colorimetry.

Kinds: (1) published values — CIE 015:2018 white point; (oracle) colour-science 0.4.7
as an independent reference for the CSV copies, Planck's law and object colour.
"""

import numpy as np
import pytest

from tubevision.colorimetry import delta_e00, xyz_to_lab
from tubevision.errors import TubevisionInputError
from tubevision.studio import spectra as sp

colour = pytest.importorskip("colour")


def test_perfect_reflector_under_d65_gives_published_white_point():
    """Kind 1 (published values).

    References
    ----------
    CIE 015:2018, Colorimetry, 4th ed., Table 5: D65, CIE 1931 2° observer,
    x = 0.31272, y = 0.32903; X, Y, Z = 95.04, 100.00, 108.88 (Y = 100).
    Tolerance: the table's last digit (5e-5 in x, y; 0.01 in XYZ ×100) plus the
    difference between 1 nm and our 5 nm sums (< 3e-5 in x, y, from memory).
    """
    xyz = sp.object_xyz(np.ones(sp.WAVELENGTHS_NM.size), sp.illuminant_spd("D65"))
    x, y = xyz[0] / xyz.sum(), xyz[1] / xyz.sum()
    assert abs(x - 0.31272) < 8e-5
    assert abs(y - 0.32903) < 8e-5
    np.testing.assert_allclose(100 * xyz, [95.04, 100.0, 108.88], atol=0.02)


def test_illuminant_a_white_point_published():
    """Kind 1: CIE 015:2018 Table 5, illuminant A, 2°: x = 0.44758, y = 0.40745."""
    xyz = sp.object_xyz(np.ones(sp.WAVELENGTHS_NM.size), sp.illuminant_spd("A"))
    assert abs(xyz[0] / xyz.sum() - 0.44758) < 1e-4
    assert abs(xyz[1] / xyz.sum() - 0.40745) < 1e-4


@pytest.mark.parametrize("name", sp.ILLUMINANT_NAMES)
def test_illuminant_csv_matches_colour_science(name):
    """Oracle: colour.SDS_ILLUMINANTS (colour-science 0.4.7) at 400, 555, 700 nm."""
    sd = colour.SDS_ILLUMINANTS[name]
    ours = sp.illuminant_spd(name)
    for wl in (400, 555, 700):
        assert ours[sp.WAVELENGTHS_NM == wl][0] == pytest.approx(sd[wl], rel=1e-6)


def test_cmfs_and_cameras_match_colour_science():
    """Oracle: colour.MSDS_CMFS and MSDS_CAMERA_SENSITIVITIES (colour-science 0.4.7)."""
    from colour.characterisation import MSDS_CAMERA_SENSITIVITIES

    cm = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    for wl in (450, 555, 600):
        np.testing.assert_allclose(sp.cmfs()[sp.WAVELENGTHS_NM == wl][0], cm[wl], rtol=1e-6)
    nik = MSDS_CAMERA_SENSITIVITIES["Nikon 5100 (NPL)"]
    sig = MSDS_CAMERA_SENSITIVITIES["Sigma SDMerill (NPL)"]
    for wl in (450, 550, 620):
        np.testing.assert_allclose(sp.sensor_sensitivities("nikon5100-npl")[sp.WAVELENGTHS_NM == wl][0],
                                   nik[wl], rtol=1e-6)
        np.testing.assert_allclose(sp.sensor_sensitivities("sigma-sdmerill-npl")[sp.WAVELENGTHS_NM == wl][0],
                                   sig[wl], rtol=1e-6)


@pytest.mark.parametrize("t_k", [2700.0, 4000.0, 6500.0])
def test_planck_matches_colour_science(t_k):
    """Oracle: colour.sd_blackbody (Planck's law, colour-science 0.4.7), both scaled to 100 at 560 nm.
    colour uses the CODATA c2 = 1.438776877e-2 m K, we use CIE's 1.4388e-2: relative 1e-4 tolerance."""
    sd = colour.sd_blackbody(t_k, colour.SpectralShape(380, 780, 5))
    ref = sd.values / sd[560] * 100.0
    np.testing.assert_allclose(sp.planck_spd(t_k), ref, rtol=2e-4)


def test_object_lab_matches_colour_science():
    """Oracle: colour.sd_to_XYZ (method 'Integration', D65, 2°) and colour.XYZ_to_Lab for a
    smooth invented reflectance; tolerance 0.05 ΔE00 covers the white-point rounding."""
    lam = sp.WAVELENGTHS_NM
    refl = 0.1 + 0.6 * np.exp(-0.5 * ((lam - 560) / 50) ** 2)
    sd = colour.SpectralDistribution(dict(zip(lam, refl)))
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"].copy().align(colour.SpectralShape(380, 780, 5))
    ill = colour.SDS_ILLUMINANTS["D65"].copy().align(colour.SpectralShape(380, 780, 5))
    xyz = colour.sd_to_XYZ(sd, cmfs, ill, method="Integration") / 100.0
    xyz_w = colour.sd_to_XYZ(colour.sd_ones(colour.SpectralShape(380, 780, 5)), cmfs, ill, method="Integration") / 100
    ref = xyz_to_lab(xyz, xyz_w)
    assert float(delta_e00(sp.object_lab_d65(refl), ref)) < 0.05


@pytest.mark.parametrize("srgb", [(0.5, 0.5, 0.5), (0.8, 0.3, 0.2), (0.2, 0.5, 0.7), (0.9, 0.85, 0.2)])
def test_reflectance_recovery_reproduces_colour(srgb):
    """Kind 2 (known answer): the recovered spectrum lies in [0, 1] and its D65 colour is the
    nominal sRGB's (IEC 61966-2-1 via tubevision.colorimetry) within 0.3 ΔE00."""
    from tubevision.colorimetry import srgb_to_lab

    rho = sp.reflectance_from_srgb(np.array(srgb))
    assert rho.shape == (81,) and rho.min() >= 0 and rho.max() <= 1
    assert float(delta_e00(sp.object_lab_d65(rho), srgb_to_lab(np.array(srgb)))) < 0.3


def test_bad_names_raise_input_errors():
    with pytest.raises(TubevisionInputError, match="unknown illuminant"):
        sp.illuminant_spd("D93")
    with pytest.raises(TubevisionInputError, match="1000-25000"):
        sp.planck_spd(300.0)
    with pytest.raises(TubevisionInputError, match="unknown camera sensor"):
        sp.sensor_sensitivities("nope")
