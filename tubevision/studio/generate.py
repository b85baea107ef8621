"""Scenes to order: the demo scenario, random scenes, condition grids, and saving.

Everything here is invented demo data: scenarios, sample names and contents
are made up for exercising the tool, not taken from any real bench.
"""

from __future__ import annotations

import itertools
import json
import struct
from pathlib import Path
from typing import Iterator, Mapping, Sequence

import numpy as np

from ..errors import TubevisionInputError
from .camera import CameraSpec
from .materials import CONTENTS
from .scene import BACKDROPS, RenderedPhoto, SceneSpec, TubeSpec, render_scene
from .spectra import ILLUMINANT_NAMES, SENSOR_NAMES

__all__ = ["demo_scene", "random_scene", "suite", "save_rendered", "LAYOUTS"]

LAYOUTS = {
    "single": (1, 1),
    "row4": (4, 1),
    "row6": (6, 1),
    "row12": (12, 1),
    "row24": (24, 1),
    "two-rows": (12, 2),
}
"""Named layouts for :func:`suite`: (number of tubes, rows)."""

_EXIF_ORIENTATION_TAG = 0x0112
"""EXIF tag number of Orientation (EXIF 2.32, Table 4)."""


def demo_scene() -> SceneSpec:
    """The demo scenario: a water-screening bench, chloride-precipitation step.

    Invented scenario: six tubes of the water-treatment QC bench at the
    chloride-precipitation step of the group I scheme: a positive control
    (white precipitate), a blank (clear), and four unknowns W-1 … W-4 (white
    precipitate, clear, faint cloud, white cloud settling). Light from a
    daylight (D65) lamp, a phone with the ``phone-a`` sensor, the tool's card
    beside the rack.
    """
    tubes = (
        TubeSpec("white-precipitate", fill_mm=52.0, pellet_mm=3.5, label="control"),
        TubeSpec("water", fill_mm=50.0, label="blank"),
        TubeSpec("white-precipitate", fill_mm=49.0, pellet_mm=2.2, label="unknown W-1"),
        TubeSpec("water", fill_mm=51.0, label="unknown W-2"),
        TubeSpec("faint-cloud", fill_mm=48.0, label="unknown W-3"),
        TubeSpec("white-cloud-settling", fill_mm=50.0, pellet_mm=1.5, label="unknown W-4"),
    )
    return SceneSpec(tubes=tubes, illuminant="D65", camera=CameraSpec(), backdrop="hbands",
                     scenario="water-screening bench, chloride-precipitation step (invented)")


def _pick(rng: np.random.Generator, options: Sequence):
    return options[int(rng.integers(len(options)))]


def random_scene(rng: np.random.Generator, *, n_tubes: tuple[int, int] = (1, 12),
                 rows: Sequence[int] = (1, 1, 2), illuminants: Sequence[str] = (*ILLUMINANT_NAMES, "planck-2700",
                                                                              "planck-4000", "planck-6500"),
                 sensors: Sequence[str] = tuple(s for s in SENSOR_NAMES if s != "ideal-cmf"),
                 contents: Sequence[str] = tuple(CONTENTS), backdrops: Sequence[str] = BACKDROPS,
                 orientations: Sequence[int] = (1, 1, 1, 6, 8, 3), width_px: int = 2016, height_px: int = 1512,
                 jpeg_quality: tuple[int, int] = (75, 95), rack: Sequence[bool] = (True, True, False)) -> SceneSpec:
    """A random scene drawn from the given ranges (all choices from ``rng``).

    Parameters
    ----------
    rng : numpy Generator — the only source of randomness.
    n_tubes : (low, high) inclusive — number of tubes.
    rows, illuminants, sensors, contents, backdrops, orientations, rack : sequences to pick from.
    width_px, height_px : photo size.
    jpeg_quality : (low, high) inclusive.

    Returns
    -------
    SceneSpec.
    """
    lo, hi = n_tubes
    if not 1 <= lo <= hi <= 24:
        raise TubevisionInputError(f"n_tubes {n_tubes}: give (low, high) with 1 <= low <= high <= 24")
    n = int(rng.integers(lo, hi + 1))
    n_rows = _pick(rng, rows) if n >= 2 else 1
    tubes = []
    for _ in range(n):
        key = _pick(rng, contents)
        c = CONTENTS[key]
        pellet = None
        if c.pellet_mm > 0:
            pellet = float(np.round(rng.uniform(1.0, 8.0), 2))
        strength = float(np.round(rng.uniform(0.6, 1.5), 3)) if c.solute else None
        turb = float(np.round(c.turbidity * rng.uniform(0.7, 1.4), 3)) if c.turbidity > 0 else None
        tubes.append(TubeSpec(key, fill_mm=float(np.round(rng.uniform(44.0, 66.0), 2)), pellet_mm=pellet,
                              strength=strength, turbidity=turb))
    cam = CameraSpec(
        sensor=_pick(rng, sensors),
        exposure_ev=float(np.round(rng.uniform(-0.5, 0.1), 3)),
        white_balance=_pick(rng, ("bright", "bright", "grey")),
        tone=float(np.round(rng.uniform(0.05, 0.3), 3)),
        saturation=float(np.round(rng.uniform(1.0, 1.3), 3)),
        full_well_e=float(np.round(rng.uniform(3000.0, 12000.0))),
        read_noise_e=float(np.round(rng.uniform(1.5, 5.0), 2)),
        blur_px=float(np.round(rng.uniform(0.3, 1.4), 3)),
        vignetting=float(np.round(rng.uniform(0.0, 0.3), 3)),
        jpeg_quality=int(rng.integers(jpeg_quality[0], jpeg_quality[1] + 1)),
        perspective=float(np.round(rng.uniform(0.0, 0.03), 4)),
    )
    return SceneSpec(tubes=tuple(tubes), rows=n_rows, illuminant=_pick(rng, illuminants), camera=cam,
                     backdrop=_pick(rng, backdrops), rack=bool(_pick(rng, rack)),
                     rack_colour=_pick(rng, ("white", "blue", "grey")),
                     exif_orientation=int(_pick(rng, orientations)), width_px=width_px, height_px=height_px,
                     zoom=float(np.round(rng.uniform(0.7, 0.9), 3)),
                     card_angle_deg=float(np.round(rng.uniform(-6.0, 6.0), 2)),
                     light_gradient=(float(np.round(rng.uniform(-0.12, 0.12), 3)),
                                     float(np.round(rng.uniform(-0.08, 0.08), 3))),
                     specular=float(np.round(rng.uniform(0.4, 1.3), 3)), scenario="random scene (invented)")


def suite(grid: Mapping[str, Sequence], *, seed: int, base: SceneSpec | None = None) -> Iterator[RenderedPhoto]:
    """Render every combination of a grid of conditions, in a fixed order.

    Parameters
    ----------
    grid : mapping with any of the keys
        ``"illuminant"`` (names), ``"sensor"`` (names), ``"contents"`` (each a contents key, given
        to every tube, or a sequence of keys cycled over the tubes), ``"layout"`` (keys of
        :data:`LAYOUTS`), ``"backdrop"`` (kinds). Missing keys keep ``base``'s value.
    seed : int — render k (counting from 0 in grid order) uses seed ``seed + k``.
    base : SceneSpec, optional — the scene to vary (default: six tubes, default camera).

    Yields
    ------
    RenderedPhoto, with ``truth["conditions"]["grid"]`` naming the grid point.

    Examples
    --------
    >>> photos = suite({"illuminant": ["D65"], "layout": ["single"]}, seed=1,
    ...                base=SceneSpec(width_px=160, height_px=120))
    >>> [p.truth["conditions"]["grid"]["illuminant"] for p in photos]
    ['D65']
    """
    known = ("illuminant", "sensor", "contents", "layout", "backdrop")
    unknown = set(grid) - set(known)
    if unknown:
        raise TubevisionInputError(f"suite grid: unknown key(s) {sorted(unknown)}; use {', '.join(known)}")
    for lay in grid.get("layout", ()):
        if lay not in LAYOUTS:
            raise TubevisionInputError(f"suite layout {lay!r}: choose one of {', '.join(LAYOUTS)}")
    base = base or SceneSpec(tubes=tuple(TubeSpec("water") for _ in range(6)))
    keys = [k for k in known if k in grid]
    for k, combo in enumerate(itertools.product(*(list(grid[key]) for key in keys))):
        point = dict(zip(keys, combo))
        spec = base
        if "layout" in point:
            n, rows = LAYOUTS[point["layout"]]
            old = spec.tubes
            spec = spec.with_(tubes=tuple(old[i % len(old)] for i in range(n)), rows=rows)
        if "contents" in point:
            cs = point["contents"]
            cs = [cs] if isinstance(cs, str) else list(cs)
            spec = spec.with_(tubes=tuple(TubeSpec(cs[i % len(cs)], fill_mm=t.fill_mm, label=t.label)
                                          for i, t in enumerate(spec.tubes)))
        if "illuminant" in point:
            spec = spec.with_(illuminant=point["illuminant"])
        if "sensor" in point:
            spec = spec.with_(camera=spec.camera.with_(sensor=point["sensor"]))
        if "backdrop" in point:
            spec = spec.with_(backdrop=point["backdrop"])
        photo = render_scene(spec, seed=seed + k)
        photo.truth["conditions"]["grid"] = {key: (v if isinstance(v, str) else list(v)) for key, v in point.items()}
        yield photo


def _exif_segment(orientation: int) -> bytes:
    from PIL import Image

    exif = Image.Exif()
    exif[_EXIF_ORIENTATION_TAG] = int(orientation)
    payload = exif.tobytes()
    if not payload.startswith(b"Exif\x00\x00"):
        payload = b"Exif\x00\x00" + payload
    return b"\xff\xe1" + struct.pack(">H", len(payload) + 2) + payload


def save_rendered(rendered: RenderedPhoto, path: str | Path, *, truth: bool = True, jpeg_quality: int = 92) -> Path:
    """Write a rendered photo as JPEG or PNG with its EXIF orientation tag (and its truth).

    Parameters
    ----------
    rendered : RenderedPhoto.
    path : ``.jpg``/``.jpeg`` or ``.png`` file to write.
    truth : bool — also write the truth as ``<stem>.truth.json`` beside it.
    jpeg_quality : int — quality used only when the render carries no JPEG stream of its own.

    Returns
    -------
    Path of the image written.

    Notes
    -----
    A render that was already JPEG-compressed is written byte for byte with an EXIF APP1
    segment (JPEG File Interchange: APP1 right after SOI, as EXIF 2.32 Sec. 4.5.4 places it),
    so the file decodes to exactly ``rendered.pixels``.
    """
    from PIL import Image

    p = Path(path)
    ext = p.suffix.lower()
    if ext not in (".jpg", ".jpeg", ".png"):
        raise TubevisionInputError(f"{p.name}: write .jpg, .jpeg or .png")
    tag = int(rendered.exif_orientation)
    if ext == ".png":
        exif = Image.Exif()
        exif[_EXIF_ORIENTATION_TAG] = tag
        Image.fromarray(rendered.pixels).save(p, format="PNG", exif=exif.tobytes() if tag != 1 else None)
    else:
        data = rendered.encoded
        if data is None:
            import io

            buf = io.BytesIO()
            Image.fromarray(rendered.pixels).save(buf, format="JPEG", quality=int(jpeg_quality))
            data = buf.getvalue()
        if tag != 1:
            data = data[:2] + _exif_segment(tag) + data[2:]
        p.write_bytes(data)
    if truth:
        p.with_name(p.stem + ".truth.json").write_text(
            json.dumps(rendered.truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    return p
