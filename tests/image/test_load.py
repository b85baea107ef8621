"""Photo loading: formats, orientation, metadata, colour management, bad input."""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest
from PIL import Image

from tubevision.errors import TubevisionInputError
from tubevision.image import load_photo, reduced_copy, to_linear

from ._icc import D65_XY, P3_PRIMARIES_XY, rgb_matrix_profile


def _marked(h=40, w=60):
    """A grey image with a red block at the top-left corner, to follow orientation."""
    arr = np.full((h, w, 3), 128, np.uint8)
    arr[:8, :12] = (255, 0, 0)
    return arr


def test_exif_orientation_6_gives_upright_pixels(tmp_path):
    # EXIF 2.32 Table 4: orientation 6 = stored image must be rotated 90° clockwise to display.
    exif = Image.Exif()
    exif[0x0112] = 6
    exif.get_ifd(0x8769)[0x9003] = "2026:05:04 10:31:00"
    exif[0x010F] = "Invented Phones"
    exif[0x0110] = "Model Q"
    path = tmp_path / "rot.jpg"
    Image.fromarray(_marked()).save(path, quality=95, exif=exif.tobytes())
    photo = load_photo(path)
    assert photo.pixels.shape == (60, 40, 3)
    assert (photo.meta.width, photo.meta.height) == (40, 60)
    # the stored top-left block ends up top-right after a clockwise quarter turn
    assert photo.pixels[3, 36, 0] > 200 and photo.pixels[3, 36, 1] < 60
    assert photo.pixels[3, 3, 0] < 160
    assert photo.meta.exif_orientation == 6
    assert photo.meta.captured_at == "2026-05-04T10:31:00"
    assert photo.meta.camera_make == "Invented Phones" and photo.meta.camera_model == "Model Q"


def test_orientation_8_and_3(tmp_path):
    for tag, corner in ((8, (-4, 3)), (3, (-4, -4))):
        exif = Image.Exif()
        exif[0x0112] = tag
        path = tmp_path / f"o{tag}.png"
        Image.fromarray(_marked()).save(path, exif=exif.tobytes())
        px = load_photo(path).pixels
        assert px[corner[0], corner[1], 0] == 255 and px[corner[0], corner[1], 1] == 0


def test_heic_written_by_pillow_heif_reads_back(tmp_path):
    pillow_heif = pytest.importorskip("pillow_heif")
    pillow_heif.register_heif_opener()
    arr = np.zeros((64, 64, 3), np.uint8)
    arr[:, :32] = (200, 40, 40)
    arr[:, 32:] = (40, 40, 200)
    path = tmp_path / "phone.heic"
    Image.fromarray(arr).save(path, quality=95)
    photo = load_photo(path)
    assert photo.meta.format == "HEIC/HEIF"
    assert photo.pixels.shape == (64, 64, 3)
    assert np.abs(photo.pixels[32, 8].astype(int) - (200, 40, 40)).max() < 12
    assert np.abs(photo.pixels[32, 56].astype(int) - (40, 40, 200)).max() < 12


def test_png_16_bit_keeps_16_bits(tmp_path):
    import cv2

    arr = np.zeros((10, 12, 3), np.uint16)
    arr[..., 0] = 1000  # R
    arr[..., 1] = 30000
    arr[..., 2] = 65535
    path = tmp_path / "deep.png"
    cv2.imwrite(str(path), arr[:, :, ::-1])  # cv2 writes BGR
    photo = load_photo(path)
    assert photo.pixels.dtype == np.uint16 and photo.meta.bit_depth == 16
    assert photo.pixels[0, 0].tolist() == [1000, 30000, 65535]


def test_tiff_16_bit_and_webp(tmp_path):
    import cv2

    arr = np.full((8, 8, 3), 40000, np.uint16)
    cv2.imwrite(str(tmp_path / "deep.tif"), arr)
    assert load_photo(tmp_path / "deep.tif").pixels.dtype == np.uint16
    Image.fromarray(_marked()).save(tmp_path / "a.webp", lossless=True)
    px = load_photo(tmp_path / "a.webp").pixels
    assert px[2, 2].tolist() == [255, 0, 0]


@pytest.mark.parametrize("mode", ["L", "LA", "RGBA", "P", "CMYK", "I;16"])
def test_other_modes_become_rgb(tmp_path, mode):
    base = Image.fromarray(_marked())
    if mode == "I;16":
        im = Image.fromarray(np.full((20, 30), 50000, np.uint16))
    else:
        im = base.convert(mode)
    ext = "jpg" if mode == "CMYK" else ("tif" if mode == "I;16" else "png")
    path = tmp_path / f"m.{ext}"
    im.save(path)
    photo = load_photo(path)
    assert photo.pixels.ndim == 3 and photo.pixels.shape[2] == 3


def test_alpha_is_composited_over_white(tmp_path):
    arr = np.zeros((4, 4, 4), np.uint8)  # fully transparent black
    Image.fromarray(arr, "RGBA").save(tmp_path / "t.png")
    photo = load_photo(tmp_path / "t.png")
    assert photo.pixels.min() == 255
    assert any("alpha" in w for w in photo.meta.warnings)


def test_display_p3_profile_is_converted_to_srgb(tmp_path):
    """A photo tagged Display P3 is converted, checked against colour-science as oracle.

    Oracle: colour-science 0.4 ``RGB_COLOURSPACES['Display P3']`` (SMPTE EG 432-1
    primaries, D65) then ``XYZ_to_sRGB`` (IEC 61966-2-1). The test profile's tone
    curve is a pure 2.2 gamma, reproduced exactly on the oracle side.
    """
    colour = pytest.importorskip("colour")
    icc = rgb_matrix_profile("Test Display P3", P3_PRIMARIES_XY, D65_XY, 2.2)
    rgb8 = np.array([200, 100, 50])
    Image.fromarray(np.full((8, 8, 3), rgb8, np.uint8)).save(tmp_path / "p3.png", icc_profile=icc)
    photo = load_photo(tmp_path / "p3.png")
    assert photo.meta.icc_profile == "Test Display P3"
    xyz = colour.RGB_to_XYZ((rgb8 / 255.0) ** 2.2, colour.RGB_COLOURSPACES["Display P3"],
                            apply_cctf_decoding=False)
    expected = np.clip(colour.XYZ_to_sRGB(xyz), 0, 1) * 255
    # 2 code values: 8-bit rounding in LittleCMS's pipeline and the s15.16 matrix encoding.
    assert np.abs(photo.pixels[4, 4] - expected).max() <= 2.0


def test_linear_decode_matches_iec_formula():
    # IEC 61966-2-1:1999 eq. 5 at code value 128: ((128/255 + 0.055)/1.055)^2.4 = 0.21586
    assert to_linear(np.array([128], np.uint8))[0] == pytest.approx(0.215861, abs=1e-6)
    assert to_linear(np.array([0, 255], np.uint8)).tolist() == [0.0, 1.0]
    assert to_linear(np.array([65535], np.uint16))[0] == pytest.approx(1.0)


def test_reduced_copy_scale():
    small, scale = reduced_copy(np.zeros((3000, 4000, 3), np.uint8), max_side=1000)
    assert small.shape == (750, 1000, 3) and scale == pytest.approx(4.0)


# --- bad input: each gives TubevisionInputError with a one-line message -------------------

def _png_with_size(w: int, h: int) -> bytes:
    buf = io.BytesIO()
    Image.new("RGB", (1, 1)).save(buf, "PNG")
    data = bytearray(buf.getvalue())
    ihdr = struct.pack(">II", w, h) + bytes(data[24:29])
    data[16:29] = ihdr
    data[29:33] = struct.pack(">I", zlib.crc32(b"IHDR" + ihdr) & 0xFFFFFFFF)
    return bytes(data)


@pytest.mark.parametrize(
    "name, content, match",
    [
        ("empty.jpg", b"", "empty"),
        ("notes.jpg", b"this is a lab note, not a photo\n", "not an image"),
        ("anim.gif", None, "unsupported format GIF"),
        ("bomb.png", "bomb", "over the limit"),
        ("cut.jpg", "truncated", "corrupt or truncated"),
    ],
)
def test_bad_files(tmp_path, name, content, match):
    path = tmp_path / name
    if content is None:
        Image.new("RGB", (4, 4)).save(path, "GIF")
    elif content == "bomb":
        path.write_bytes(_png_with_size(100_000, 100_000))
    elif content == "truncated":
        buf = io.BytesIO()
        Image.fromarray(np.random.default_rng(0).integers(0, 255, (200, 200, 3), dtype=np.uint8)).save(
            buf, "JPEG")
        path.write_bytes(buf.getvalue()[:3000])
    else:
        path.write_bytes(content)
    with pytest.raises(TubevisionInputError, match=match) as info:
        load_photo(path)
    assert "\n" not in str(info.value)


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(TubevisionInputError, match="no such file"):
        load_photo(tmp_path / "nope.jpg")
    with pytest.raises(TubevisionInputError, match="is a folder"):
        load_photo(tmp_path)
