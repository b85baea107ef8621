"""Stage 1, load: decode a photo into an upright RGB array and its metadata.

This is the only module that decodes photos. It applies the EXIF orientation
(so every coordinate refers to the upright photo a person sees), converts
greyscale, alpha, palette and CMYK images to RGB, converts an embedded
non-sRGB ICC profile (phones often embed Display P3) to sRGB with Pillow's
colour management, and keeps the decoded integer array: a 12-megapixel
photo as float64 would be 290 MB. Regions become float32 linear light only
where they are measured, through :func:`to_linear`.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import logging
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import TubevisionInputError

__all__ = [
    "MAX_PIXELS",
    "SUPPORTED_FORMATS",
    "PhotoMeta",
    "Photo",
    "load_photo",
    "photo_from_array",
    "to_linear",
    "to_unit_float",
    "reduced_copy",
]

log = logging.getLogger(__name__)

MAX_PIXELS = 210_000_000
"""Largest photo accepted, in pixels. The largest phone sensors sold in 2026
give 200 MP (from memory); anything larger is treated as a decompression
bomb rather than decoded."""

SUPPORTED_FORMATS = {"JPEG": "JPEG", "MPO": "JPEG", "PNG": "PNG", "TIFF": "TIFF",
                     "WEBP": "WebP", "HEIF": "HEIC/HEIF", "AVIF": "AVIF"}
"""Pillow format names accepted, mapped to the names used in messages. MPO is
the multi-picture JPEG some phones write; its first frame is used."""

_EXIF_ORIENTATION = 0x0112
_EXIF_MAKE = 0x010F
_EXIF_MODEL = 0x0110
_EXIF_DATETIME = 0x0132
_EXIF_IFD = 0x8769
_EXIF_DATETIME_ORIGINAL = 0x9003
_EXIF_OFFSET_TIME_ORIGINAL = 0x9011


@dataclass(frozen=True)
class PhotoMeta:
    """What is known about a photo besides its pixels.

    ``width`` and ``height`` are those of the upright image (after EXIF
    orientation). ``captured_at`` is the EXIF capture time as ISO 8601
    (with its offset when the camera wrote one), or None.
    """

    file: str
    sha256: str
    width: int
    height: int
    format: str
    bit_depth: int
    captured_at: str | None = None
    camera_make: str | None = None
    camera_model: str | None = None
    exif_orientation: int = 1
    icc_profile: str | None = None
    warnings: tuple[str, ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class Photo:
    """An upright photo.

    ``pixels`` is an ndarray of shape (H, W, 3), dtype uint8 or uint16,
    sRGB-encoded, RGB order, rows top to bottom.
    """

    pixels: np.ndarray
    meta: PhotoMeta

    @property
    def max_value(self) -> int:
        """Largest code value of the pixel dtype (255 or 65535)."""
        return int(np.iinfo(self.pixels.dtype).max)


def _register_heif() -> None:
    try:
        import pillow_heif
    except ImportError:  # pragma: no cover - pillow-heif is a declared dependency
        log.debug("pillow-heif missing: HEIC photos cannot be read")
        return
    pillow_heif.register_heif_opener()
    if hasattr(pillow_heif, "register_avif_opener"):
        try:
            pillow_heif.register_avif_opener()
        except Exception:  # pragma: no cover - optional codec
            log.debug("AVIF opener not available")


def _exif_text(value) -> str | None:
    if value is None:
        return None
    if isinstance(value, bytes):
        value = value.decode("ascii", "replace")
    text = str(value).strip().strip("\x00").strip()
    return text or None


def _capture_time(exif) -> str | None:
    """EXIF DateTimeOriginal (else DateTime) as ISO 8601, per EXIF 2.32 §4.6.5."""
    sub = exif.get_ifd(_EXIF_IFD) if exif else {}
    raw = _exif_text(sub.get(_EXIF_DATETIME_ORIGINAL)) or _exif_text(exif.get(_EXIF_DATETIME))
    if raw is None:
        return None
    try:
        when = _dt.datetime.strptime(raw[:19], "%Y:%m:%d %H:%M:%S")
    except ValueError:
        return None
    text = when.isoformat()
    offset = _exif_text(sub.get(_EXIF_OFFSET_TIME_ORIGINAL))
    if offset and len(offset) == 6 and offset[0] in "+-" and offset[3] == ":":
        text += offset
    return text


def _orient(arr: np.ndarray, orientation: int) -> np.ndarray:
    """Apply an EXIF orientation tag (EXIF 2.32 Table 4, values 1-8) to (H, W, C)."""
    ops = {
        2: lambda a: a[:, ::-1],
        3: lambda a: a[::-1, ::-1],
        4: lambda a: a[::-1],
        5: lambda a: a.transpose(1, 0, 2),
        6: lambda a: np.rot90(a, -1),
        7: lambda a: np.rot90(a, 1)[::-1],
        8: lambda a: np.rot90(a, 1),
    }
    op = ops.get(orientation)
    return np.ascontiguousarray(op(arr)) if op else arr


def _is_srgb_profile(icc: bytes) -> tuple[bool, str]:
    from PIL import ImageCms

    try:
        prof = ImageCms.ImageCmsProfile(io.BytesIO(icc))
        desc = ImageCms.getProfileDescription(prof).strip()
    except (OSError, ImageCms.PyCMSError):
        return False, "unreadable ICC profile"
    return ("srgb" in desc.lower().replace(" ", "")), desc


def _sixteen_bit(path: Path, fmt: str, mode: str) -> bool:
    if fmt == "PNG":
        with open(path, "rb") as fh:
            head = fh.read(26)
        return len(head) >= 25 and head[24] == 16
    return fmt == "TIFF" and mode.startswith("I;16") or (fmt == "TIFF" and mode in ("RGB", "RGBA")
                                                        and _tiff_bits(path) == 16)


def _tiff_bits(path: Path) -> int:
    from PIL import Image

    with Image.open(path) as im:
        bits = im.tag_v2.get(258) if hasattr(im, "tag_v2") else None
    if isinstance(bits, tuple):
        return int(bits[0])
    return int(bits) if bits else 8


def _decode_16bit(data: bytes, where: str) -> np.ndarray:
    import cv2

    buf = np.frombuffer(data, dtype=np.uint8)
    arr = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED | cv2.IMREAD_IGNORE_ORIENTATION)
    if arr is None:
        raise TubevisionInputError(f"{where}: cannot decode the image (corrupt or truncated?)")
    if arr.ndim == 2:
        arr = np.repeat(arr[:, :, None], 3, axis=2)
    elif arr.shape[2] == 4:
        rgb = arr[:, :, 2::-1].astype(np.float64)
        alpha = arr[:, :, 3:4].astype(np.float64) / 65535.0
        arr = np.round(rgb * alpha + 65535.0 * (1.0 - alpha)).astype(np.uint16)
    else:
        arr = arr[:, :, 2::-1]
    if arr.dtype == np.uint8:
        return np.ascontiguousarray(arr)
    return np.ascontiguousarray(arr.astype(np.uint16))


def _pil_to_rgb(im, where: str):
    """Convert any Pillow mode to 8-bit RGB; alpha is composited over white."""
    from PIL import Image

    if im.mode in ("RGBA", "LA", "PA") or (im.mode == "P" and "transparency" in im.info):
        rgba = im.convert("RGBA")
        white = Image.new("RGBA", rgba.size, (255, 255, 255, 255))
        return Image.alpha_composite(white, rgba).convert("RGB"), "alpha composited over white"
    if im.mode == "RGB":
        return im, None
    if im.mode in ("I;16", "I;16B", "I;16L", "I"):
        arr = np.asarray(im, dtype=np.float64)
        top = 65535.0 if arr.max() > 255 else 255.0
        grey = np.round(np.clip(arr / top, 0, 1) * 255).astype(np.uint8)
        return Image.fromarray(np.repeat(grey[:, :, None], 3, axis=2)), None
    return im.convert("RGB"), None


def load_photo(path: str | os.PathLike, *, max_pixels: int = MAX_PIXELS) -> Photo:
    """Read a photo file into an upright :class:`Photo`.

    Parameters
    ----------
    path : path to a JPEG, PNG (8 or 16 bit), TIFF, WebP or HEIC/HEIF file.
    max_pixels : larger images are refused as possible decompression bombs.

    Returns
    -------
    Photo — pixels (H, W, 3) uint8 or uint16, sRGB-encoded, upright.

    Raises
    ------
    TubevisionInputError
        Missing file, a folder, zero bytes, not an image, an unsupported
        format, a corrupt or truncated file, or too many pixels.
    """
    from PIL import Image, ImageCms, ImageOps, UnidentifiedImageError

    _register_heif()
    p = Path(path)
    where = str(p)
    if not p.exists():
        raise TubevisionInputError(f"{where}: no such file")
    if p.is_dir():
        raise TubevisionInputError(f"{where}: is a folder, not a photo")
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise TubevisionInputError(f"{where}: cannot read ({exc.strerror or exc})") from None
    if not data:
        raise TubevisionInputError(f"{where}: file is empty (0 bytes)")
    sha256 = hashlib.sha256(data).hexdigest()

    old_limit = Image.MAX_IMAGE_PIXELS
    Image.MAX_IMAGE_PIXELS = None  # we apply our own limit before decoding
    try:
        try:
            im = Image.open(io.BytesIO(data))
        except UnidentifiedImageError:
            raise TubevisionInputError(f"{where}: not an image file Pillow can identify") from None
        except (OSError, SyntaxError, ValueError) as exc:
            raise TubevisionInputError(f"{where}: cannot open image ({exc})") from None
        fmt = (im.format or "").upper()
        if fmt not in SUPPORTED_FORMATS:
            names = ", ".join(sorted(set(SUPPORTED_FORMATS.values())))
            raise TubevisionInputError(f"{where}: unsupported format {fmt or 'unknown'}; use {names}")
        w0, h0 = im.size
        if w0 * h0 > max_pixels:
            raise TubevisionInputError(
                f"{where}: {w0}x{h0} = {w0 * h0} pixels is over the limit of {max_pixels}"
                " (possible decompression bomb)")
        if w0 < 1 or h0 < 1:
            raise TubevisionInputError(f"{where}: image has no pixels")
        exif = im.getexif()
        orientation = int(exif.get(_EXIF_ORIENTATION, 1) or 1)
        if orientation not in range(1, 9):
            orientation = 1
        warnings: list[str] = []
        icc = im.info.get("icc_profile")
        icc_desc = None
        try:
            if _sixteen_bit(p, fmt, im.mode):
                arr = _orient(_decode_16bit(data, where), orientation)
                bit_depth = 16 if arr.dtype == np.uint16 else 8
                if icc:
                    ok, icc_desc = _is_srgb_profile(icc)
                    if not ok:
                        warnings.append(f"embedded ICC profile '{icc_desc}' of a 16-bit image was not "
                                        "converted; colours are read as sRGB")
            else:
                im.load()
                if getattr(im, "n_frames", 1) > 1:
                    im.seek(0)
                bit_depth = 8
                rgb_src = im
                if icc:
                    ok, icc_desc = _is_srgb_profile(icc)
                    if not ok:
                        try:
                            src = ImageCms.ImageCmsProfile(io.BytesIO(icc))
                            dst = ImageCms.createProfile("sRGB")
                            base = im if im.mode in ("RGB", "CMYK", "L") else im.convert("RGB")
                            rgb_src = ImageCms.profileToProfile(
                                base, src, dst, renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC,
                                outputMode="RGB")
                            log.debug("converted ICC profile %s to sRGB", icc_desc)
                        except (OSError, ImageCms.PyCMSError, ValueError) as exc:
                            warnings.append(f"embedded ICC profile '{icc_desc}' could not be converted "
                                            f"({exc}); colours are read as sRGB")
                rgb, note = _pil_to_rgb(rgb_src, where)
                if note:
                    warnings.append(note)
                rgb = ImageOps.exif_transpose(rgb) if orientation != 1 else rgb
                arr = np.asarray(rgb, dtype=np.uint8)
                if arr.ndim != 3 or arr.shape[2] != 3:
                    raise TubevisionInputError(f"{where}: unexpected pixel layout {arr.shape}")
                arr = np.ascontiguousarray(arr)
        except TubevisionInputError:
            raise
        except (OSError, SyntaxError, ValueError, EOFError) as exc:
            raise TubevisionInputError(f"{where}: corrupt or truncated image ({exc})") from None
    finally:
        Image.MAX_IMAGE_PIXELS = old_limit

    meta = PhotoMeta(
        file=p.name,
        sha256=sha256,
        width=int(arr.shape[1]),
        height=int(arr.shape[0]),
        format=SUPPORTED_FORMATS[fmt],
        bit_depth=bit_depth,
        captured_at=_capture_time(exif),
        camera_make=_exif_text(exif.get(_EXIF_MAKE)),
        camera_model=_exif_text(exif.get(_EXIF_MODEL)),
        exif_orientation=orientation,
        icc_profile=icc_desc,
        warnings=tuple(warnings),
    )
    return Photo(pixels=arr, meta=meta)


def photo_from_array(pixels: np.ndarray, *, name: str = "array") -> Photo:
    """Wrap an in-memory upright sRGB array (uint8 or uint16, (H, W, 3)) as a Photo.

    The sha256 is of the raw pixel bytes, since there is no file.
    """
    arr = np.asarray(pixels)
    if arr.ndim != 3 or arr.shape[2] != 3 or arr.dtype not in (np.uint8, np.uint16):
        raise TubevisionInputError(
            f"pixels: expected (H, W, 3) uint8 or uint16, got {arr.shape} {arr.dtype}")
    meta = PhotoMeta(file=name, sha256=hashlib.sha256(arr.tobytes()).hexdigest(),
                     width=int(arr.shape[1]), height=int(arr.shape[0]), format="array",
                     bit_depth=8 if arr.dtype == np.uint8 else 16)
    return Photo(pixels=np.ascontiguousarray(arr), meta=meta)


_LUT_CACHE: dict[str, np.ndarray] = {}


def _linear_lut(dtype: np.dtype) -> np.ndarray:
    from .colorimetry import srgb_to_linear

    key = np.dtype(dtype).str
    lut = _LUT_CACHE.get(key)
    if lut is None:
        top = np.iinfo(dtype).max
        lut = srgb_to_linear(np.arange(top + 1, dtype=np.float64) / top).astype(np.float32)
        _LUT_CACHE[key] = lut
    return lut


def to_linear(pixels: np.ndarray) -> np.ndarray:
    """sRGB-encoded integer pixels (any shape, uint8/uint16) to float32 linear light in [0, 1].

    Uses a lookup table of IEC 61966-2-1 eq. 5 (see :func:`tubevision.colorimetry.srgb_to_linear`).
    """
    return _linear_lut(pixels.dtype)[pixels]


def to_unit_float(pixels: np.ndarray) -> np.ndarray:
    """Integer pixels to float32 in [0, 1], still sRGB-encoded (scaling by the dtype's maximum)."""
    return pixels.astype(np.float32) / np.float32(np.iinfo(pixels.dtype).max)


REDUCE_SLACK = 1.02
"""A reduced copy may be this much longer or shorter than asked: area averaging by an exact factor 2
is several times faster in OpenCV than by an arbitrary factor (measured in
``bench/bench_speed.py``), so a copy within 2 % of the size asked is kept as it is."""


def reduced_copy(pixels: np.ndarray, *, max_side: int) -> tuple[np.ndarray, float]:
    """A copy whose longer side is at most about ``max_side``, by area averaging.

    The photo is halved (2 × 2 area mean) while the half is no shorter than ``max_side``
    (within :data:`REDUCE_SLACK`), then area-averaged to ``max_side`` unless it is already
    within that slack of it. Returns the reduced uint8 copy and the scale factor (full px per reduced px).
    Finding runs on this copy; measuring touches full-resolution pixels.
    """
    import cv2

    h, w = pixels.shape[:2]
    src = pixels if pixels.dtype == np.uint8 else (pixels >> 8).astype(np.uint8)
    if max(h, w) <= max_side:
        return src.copy(), 1.0
    # how many halvings, from the shapes alone
    hh, ww, k = h, w, 0
    while max(hh, ww) // 2 >= max_side / REDUCE_SLACK and min(hh, ww) >= 2:
        hh, ww, k = hh // 2, ww // 2, k + 1
    small = _halved(src, k)
    if max(small.shape[:2]) > REDUCE_SLACK * max_side:
        scale = max(h, w) / float(max_side)
        size = (max(1, round(w / scale)), max(1, round(h / scale)))
        small = cv2.resize(small, size, interpolation=cv2.INTER_AREA)
    else:
        small = small.copy()          # the halvings are kept for the next copy of this photo
    return small, (w / small.shape[1] + h / small.shape[0]) / 2.0


_HALVINGS: dict = {"src": None, "chain": []}
"""The successive 2 × 2 halvings of the photo last reduced: the card's and the tubes' searches
reduce the same photo to different sizes through the same halvings. The photo itself is
held, so the identity test cannot match another array; the stages never write into a photo."""


def _halved(src: np.ndarray, k: int) -> np.ndarray:
    """``src`` halved ``k`` times by 2 × 2 area means (odd last rows/columns dropped); the
    arrays returned are shared and must not be written to."""
    import cv2

    if k == 0:
        return src
    if _HALVINGS["src"] is not src:
        _HALVINGS["src"], _HALVINGS["chain"] = src, []
    chain = _HALVINGS["chain"]
    while len(chain) < k:
        prev = chain[-1] if chain else src
        hh, ww = prev.shape[:2]
        chain.append(cv2.resize(prev[: hh - hh % 2, : ww - ww % 2], (ww // 2, hh // 2),
                                interpolation=cv2.INTER_AREA))
    return chain[k - 1]
