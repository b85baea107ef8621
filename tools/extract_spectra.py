"""Extract the published spectral tables the studio needs into CSV, once.

colour-science is a test-only dependency of tubevision, so the renderer reads
these CSV copies (numpy only). Run from the repository root::

    /work/venv/bin/python tools/extract_spectra.py tubevision/data/spectra

Each CSV starts with ``#`` lines that name the original publication, the
version of colour-science the values were read from, the units and the
sampling; then one header row and one row per wavelength.

Sources
-------
* CIE 1931 2° colour-matching functions: CIE 015:2018, Colorimetry, 4th ed.,
  Table 6 (DOI 10.25039/TR.015.2018); sampled at 5 nm, 380-780 nm.
* CIE illuminants A, D50, D65 (relative spectral power, S(560 nm) = 100 for A,
  the D-series normalised as CIE publishes): CIE 015:2018 Table 5 / ISO/CIE
  11664-2 (CIE S 014-2); FL2, FL11 (CIE 015:2018 Table 10.1), LED-B3 and
  LED-RGB1 (CIE 015:2018 Table 10.4).
* Camera spectral sensitivities 'Nikon 5100 (NPL)' and 'Sigma SDMerill (NPL)':
  National Physical Laboratory camera spectral sensitivity data set as shipped
  in colour-science 0.4.7 (``colour.characterisation.MSDS_CAMERA_SENSITIVITIES``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

GRID_NM = np.arange(380, 781, 5)
"""Wavelength grid of the CIE tables written (nm): 380-780 nm at 5 nm, the
sampling CIE 015:2018 recommends for colorimetric sums (its section 7.1)."""

ILLUMINANTS = {
    "A": "CIE 015:2018 Table 5 (CIE standard illuminant A, ISO/CIE 11664-2)",
    "D50": "CIE 015:2018 Table 5 (CIE illuminant D50)",
    "D65": "CIE 015:2018 Table 5 (CIE standard illuminant D65, ISO/CIE 11664-2)",
    "FL2": "CIE 015:2018 Table 10.1 (fluorescent lamp FL2, cool white)",
    "FL11": "CIE 015:2018 Table 10.1 (fluorescent lamp FL11, narrow-band triphosphor)",
    "LED-B3": "CIE 015:2018 Table 10.4 (LED illuminant LED-B3, phosphor-converted blue)",
    "LED-RGB1": "CIE 015:2018 Table 10.4 (LED illuminant LED-RGB1, three-chip RGB)",
}


def _write(path: Path, header: list[str], columns: list[str], rows: np.ndarray) -> None:
    lines = [f"# {h}" for h in header]
    lines.append(",".join(columns))
    for r in rows:
        lines.append(",".join([f"{r[0]:g}"] + [f"{v:.7g}" for v in r[1:]]))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    """Write the CSV tables into the folder given as the only argument."""
    import colour  # test-only dependency: used here once, never at run time
    from colour.characterisation import MSDS_CAMERA_SENSITIVITIES

    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0] if argv else "tubevision/data/spectra")
    out.mkdir(parents=True, exist_ok=True)
    ver = f"colour-science {colour.__version__}"

    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    vals = np.array([cmfs[w] for w in GRID_NM])
    _write(out / "cie1931_2deg_cmfs.csv",
           ["CIE 1931 2 degree standard observer colour-matching functions xbar, ybar, zbar",
            "Source: CIE 015:2018 Colorimetry 4th ed., Table 6 (DOI 10.25039/TR.015.2018)",
            f"Read from: {ver}, colour.MSDS_CMFS['CIE 1931 2 Degree Standard Observer']",
            "Units: wavelength nm; values dimensionless (ybar peak = 1)",
            "Sampling: 380-780 nm at 5 nm"],
           ["wavelength_nm", "xbar", "ybar", "zbar"], np.column_stack([GRID_NM, vals]))

    names = list(ILLUMINANTS)
    cols = []
    for n in names:
        sd = colour.SDS_ILLUMINANTS[n]
        cols.append(np.array([sd[w] for w in GRID_NM]))
    _write(out / "cie_illuminants.csv",
           ["CIE illuminants, relative spectral power distributions"]
           + [f"{n}: {src}" for n, src in ILLUMINANTS.items()]
           + [f"Read from: {ver}, colour.SDS_ILLUMINANTS",
              "Units: wavelength nm; relative spectral power (dimensionless, CIE normalisation)",
              "Sampling: 380-780 nm at 5 nm"],
           ["wavelength_nm"] + names, np.column_stack([GRID_NM] + cols))

    for key, fname in (("Nikon 5100 (NPL)", "camera_nikon5100_npl.csv"),
                       ("Sigma SDMerill (NPL)", "camera_sigma_sdmerill_npl.csv")):
        m = MSDS_CAMERA_SENSITIVITIES[key]
        wl = m.wavelengths
        _write(out / fname,
               [f"Camera spectral sensitivities '{key}'",
                "Source: National Physical Laboratory (NPL) camera spectral sensitivity measurements,",
                f"as shipped in {ver}, colour.characterisation.MSDS_CAMERA_SENSITIVITIES['{key}']",
                "Units: wavelength nm; relative sensitivity (dimensionless, as published)",
                f"Sampling: {wl[0]:g}-{wl[-1]:g} nm at {wl[1] - wl[0]:g} nm (native)"],
               ["wavelength_nm", "red", "green", "blue"], np.column_stack([wl, m.values]))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
