"""Image I/O: formats, linear intensity, saturation, and refusal of bad files."""

from __future__ import annotations

import struct
import threading
import time
import zlib

import cv2
import numpy as np
import pytest

from flakebook.errors import Cancelled, InputError
from flakebook.imaging.io import (
    from_array,
    linear_to_srgb,
    read_header,
    read_image,
    srgb_to_linear,
    wait_until_readable,
)


def _png_chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def _png_with_header(width: int, height: int) -> bytes:
    """A PNG whose IHDR claims width x height, with one tiny IDAT and IEND."""
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + _png_chunk(b"IHDR", ihdr)
        + _png_chunk(b"IDAT", zlib.compress(b"\x00" * 4))
        + _png_chunk(b"IEND", b"")
    )


# ---- sRGB transfer function ------------------------------------------------------------------


def test_srgb_decoding_matches_iec_61966_2_1():
    """IEC 61966-2-1:1999 (sRGB), section 5.2: V <= 0.04045 -> V/12.92, else ((V+0.055)/1.055)^2.4.

    Checked against the standard's own break point (0.04045 -> 0.0031308) and against the
    general-purpose reference library colour-science (colour.models.eotf_sRGB) at every 8-bit code.
    """
    import colour

    codes = np.arange(256) / 255.0
    ours = srgb_to_linear(codes)
    ref = colour.models.eotf_sRGB(codes)
    assert np.max(np.abs(ours - ref)) < 1e-7
    assert srgb_to_linear(0.04045) == pytest.approx(0.0031308, abs=2e-7)
    assert srgb_to_linear(0.5) == pytest.approx(0.2140411, abs=1e-6)
    assert np.allclose(linear_to_srgb(ours), codes, atol=1e-9)


def test_8bit_png_decodes_to_linear_rgb(tmp_path):
    """An 8-bit PNG is sRGB: codes map through the IEC 61966-2-1 curve, channels in r, g, b order.

    Common practice, no source: OpenCV stores BGR; the file's first channel is red.
    """
    rgb = np.zeros((4, 5, 3), np.uint8)
    rgb[..., 0] = 200
    rgb[..., 1] = 100
    rgb[..., 2] = 10
    path = tmp_path / "a.png"
    cv2.imwrite(str(path), rgb[..., ::-1])
    img = read_image(path)
    assert img.channels == ("r", "g", "b")
    assert img.intensity.dtype == np.float32 and img.intensity.shape == (4, 5, 3)
    expect = srgb_to_linear(np.array([200, 100, 10]) / 255.0)
    assert np.allclose(img.intensity[0, 0], expect, atol=1e-6)
    assert img.bit_depth == 8 and img.transfer == "srgb"
    assert not img.intensity.flags.writeable


def test_16bit_tiff_mono_is_linear(tmp_path):
    """16-bit data is linear unless told otherwise: code / 65535 (common practice, no source)."""
    a = (np.arange(12, dtype=np.uint16).reshape(3, 4) * 5000).astype(np.uint16)
    path = tmp_path / "m.tif"
    cv2.imwrite(str(path), a)
    img = read_image(path)
    assert img.channels == ("mono",)
    assert img.bit_depth == 16 and img.transfer == "linear"
    assert np.allclose(img.intensity[..., 0], a / 65535.0, atol=1e-7)


def test_jpeg_and_bmp_read(tmp_path):
    rgb = np.full((16, 16, 3), 128, np.uint8)
    for name in ("a.jpg", "a.bmp"):
        cv2.imwrite(str(tmp_path / name), rgb)
        img = read_image(tmp_path / name)
        assert img.shape == (16, 16)
        assert abs(float(img.intensity.mean()) - float(srgb_to_linear(128 / 255))) < 0.01


def test_multipage_tiff_reads_first_page_with_warning(tmp_path):
    path = tmp_path / "stack.tif"
    first = np.full((8, 9), 1000, np.uint16)
    second = np.full((8, 9), 60000, np.uint16)
    cv2.imwritemulti(str(path), [first, second])
    img = read_image(path)
    assert img.shape == (8, 9)
    assert np.allclose(img.intensity, 1000 / 65535.0)
    assert any("first page" in w for w in img.warnings)


def test_saturated_pixels_masked():
    a = np.full((10, 10, 3), 100, np.uint8)
    a[2, 3, 1] = 255
    a[5, 5] = 255
    img = from_array(a)
    assert img.saturated[2, 3] and img.saturated[5, 5]
    assert np.count_nonzero(img.saturated) == 2
    b = np.full((4, 4), 4095, np.uint16)
    b[0, 0] = 100
    img16 = from_array(b, white_level=4095)
    assert np.count_nonzero(img16.saturated) == 15
    assert img16.intensity[1, 1, 0] == pytest.approx(1.0)


def test_input_array_not_changed():
    a = np.full((6, 6, 3), 77, np.uint8)
    before = a.copy()
    from_array(a, order="bgr")
    assert np.array_equal(a, before)


# ---- bad files ---------------------------------------------------------------------------------


def test_truncated_png_is_refused(tmp_path):
    rng = np.random.default_rng(0)
    path = tmp_path / "cut.png"
    cv2.imwrite(str(path), rng.integers(0, 255, (64, 64, 3), dtype=np.uint8))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match="truncated"):
        read_image(path)


def test_text_named_tif_is_refused(tmp_path):
    path = tmp_path / "notes.tif"
    path.write_text("exposure 20 ms, 50x objective\n")
    with pytest.raises(InputError, match="not an image file: it holds text"):
        read_image(path)


def test_empty_and_missing_files(tmp_path):
    empty = tmp_path / "empty.png"
    empty.write_bytes(b"")
    with pytest.raises(InputError, match="empty"):
        read_image(empty)
    with pytest.raises(InputError, match="cannot be read"):
        read_image(tmp_path / "absent.png")


def test_zero_size_image_is_refused(tmp_path):
    path = tmp_path / "zero.png"
    path.write_bytes(_png_with_header(0, 0))
    with pytest.raises(InputError, match="zero size"):
        read_image(path)
    with pytest.raises(InputError, match="no pixels"):
        from_array(np.zeros((0, 0), np.uint8))


def test_decompression_bomb_refused_from_header(tmp_path):
    """A header claiming 100000 x 100000 pixels is refused before decoding (no allocation)."""
    path = tmp_path / "bomb.png"
    path.write_bytes(_png_with_header(100_000, 100_000))
    assert read_header(path).width == 100_000
    with pytest.raises(InputError, match="more than"):
        read_image(path)


def test_file_still_being_written(tmp_path):
    """A camera writing a file in pieces: the wait returns the image once it is complete."""
    rng = np.random.default_rng(1)
    src = tmp_path / "src.png"
    cv2.imwrite(str(src), rng.integers(0, 200, (40, 50, 3), dtype=np.uint8))
    data = src.read_bytes()
    target = tmp_path / "live.png"
    target.write_bytes(data[:100])

    def writer():
        time.sleep(0.15)
        target.write_bytes(data[: len(data) // 2])
        time.sleep(0.15)
        target.write_bytes(data)

    t = threading.Thread(target=writer)
    t.start()
    img = wait_until_readable(target, stable_s=0.3, timeout_s=10, poll_s=0.05)
    t.join()
    assert img.shape == (40, 50)


def test_incomplete_file_times_out_and_cancel_stops(tmp_path):
    target = tmp_path / "stuck.png"
    target.write_bytes(_png_with_header(10, 10)[:20])
    with pytest.raises(InputError, match="still not a complete image"):
        wait_until_readable(target, stable_s=0.05, timeout_s=0.3, poll_s=0.02)
    ev = threading.Event()
    ev.set()
    with pytest.raises(Cancelled):
        wait_until_readable(target, cancel=ev)


def test_file_that_disappears_while_waiting(tmp_path):
    target = tmp_path / "tmp_0001.png"
    target.write_bytes(_png_with_header(10, 10)[:20])

    def remove():
        time.sleep(0.1)
        target.unlink()

    t = threading.Thread(target=remove)
    t.start()
    with pytest.raises(InputError, match="disappeared"):
        wait_until_readable(target, stable_s=0.2, timeout_s=10, poll_s=0.02)
    t.join()


def test_float_tiff_without_full_scale(tmp_path):
    """A float TIFF (scientific camera, arbitrary units) is linear and nothing is masked as
    saturated unless a white level is given (common practice, no source)."""
    a = np.linspace(0, 4000, 48, dtype=np.float32).reshape(6, 8)
    path = tmp_path / "f.tif"
    cv2.imwrite(str(path), a)
    img = read_image(path)
    assert img.bit_depth == 32 and not img.saturated.any()
    assert np.allclose(img.intensity[..., 0], a)
    assert from_array(a, white_level=4000.0).saturated.sum() == 1


def test_six_byte_tiff_is_refused(tmp_path):
    """A TIFF cut off after 6 bytes (its header needs 8) is refused as truncated, not a crash."""
    path = tmp_path / "cut.tif"
    path.write_bytes(b"II*\x00\x08\x00")
    with pytest.raises(InputError, match="cut.tif.*TIFF.*truncated"):
        read_header(path)
    path.write_bytes(b"MM\x00+\x00\x08\x00\x00\x00\x00")  # BigTIFF needs 16 bytes
    with pytest.raises(InputError, match="truncated"):
        read_image(path)


def _bmp(width: int, height: int, pixels: bytes, bpp: int = 24, compression: int = 0) -> bytes:
    """A BMP with a BITMAPINFOHEADER (40 bytes) claiming width x height (Microsoft's BMP file
    format: 14-byte file header, then the info header; common practice, no source)."""
    offset = 14 + 40
    head = b"BM" + struct.pack("<IHHI", offset + len(pixels), 0, 0, offset)
    info = struct.pack("<IiiHHIIiiII", 40, width, height, 1, bpp, compression, 0, 2835, 2835, 0, 0)
    return head + info + pixels


@pytest.mark.parametrize(
    "width, height, words",
    [
        (15_000, 15_000, "15000 x 15000"),  # 225 megapixels claimed by a 154-byte file
        (200_000, 1_000, "200000 x 1000"),
        (40_000, -2_000, "40000 x 2000"),  # a top-down BMP (negative height)
    ],
)
def test_bmp_claiming_a_huge_size_is_refused_before_decoding(
    tmp_path, monkeypatch, width, height, words
):
    """The header's width and height are checked against what the file can hold (and a sane
    limit) before anything is decoded: the decoder would allocate the claimed size first."""
    path = tmp_path / "big.bmp"
    path.write_bytes(_bmp(width, height, b"\x00" * 100))

    def no_decoding(*args, **kwargs):
        raise AssertionError("the file was decoded")

    monkeypatch.setattr(cv2, "imread", no_decoding)
    with pytest.raises(InputError, match=f"big.bmp.*{words}") as info:
        read_image(path)
    assert len(str(info.value).splitlines()) <= 3
    assert "accepted" in str(info.value)


def test_small_bmp_still_reads(tmp_path):
    """A real 24-bit BMP of odd width (rows padded to 4 bytes) passes the size check."""
    rgb = np.zeros((7, 5, 3), np.uint8)
    rgb[..., 1] = 200
    cv2.imwrite(str(tmp_path / "odd.bmp"), rgb)
    img = read_image(tmp_path / "odd.bmp")
    assert img.shape == (7, 5)
