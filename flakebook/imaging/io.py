"""Reading micrographs into linear intensity.

A micrograph file (PNG, JPEG, TIFF, BMP; 8 or 16 bit; RGB or monochrome) becomes a
:class:`Micrograph`: a float32 array ``[row, col, channel]`` of linear intensity as a fraction of
the camera's full scale, the channel names (``r``, ``g``, ``b`` or ``mono``), a mask of saturated
pixels, the bit depth, the path and any warnings.

Linear intensity: 8-bit images are taken to be sRGB encoded (IEC 61966-2-1:1999) unless told
otherwise, and the sRGB transfer function is undone; 16-bit images are taken as linear unless
told otherwise. Before anything is decoded the file's header is read to check its format and its
dimensions, so that an empty, truncated, mislabelled or decompression-bomb file is refused with a
clear :class:`~flakebook.errors.InputError` instead of a crash or an out-of-memory.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np

from flakebook.errors import InputError

#: Largest image accepted, in pixels (width x height); larger files are refused before decoding.
MAX_PIXELS = 250_000_000

_ACCEPTED = "PNG, JPEG, TIFF (8/16 bit, RGB or mono) or BMP"


@dataclass(frozen=True, eq=False)
class Micrograph:
    """A micrograph in linear intensity.

    Attributes:
        channels: channel names, ``("r", "g", "b")`` or ``("mono",)``.
        saturated: bool array ``[row, col]``, True where any channel reached full scale.
        bit_depth: 8 or 16 (bits per sample of the file), or that of the array given.
        path: the file read, or None for an array.
        transfer: ``"srgb"`` when the sRGB transfer function was undone, else ``"linear"``.
        warnings: messages for the user about this image.
        corrections: what has been done to the intensities since decoding (e.g. a dark offset
            subtracted, a flat field divided), in order.
        samples: the decoded samples ``[row, col, channel]`` (RGB order, read-only) that
            :attr:`intensity` is computed from, or the linear float32 intensity itself.

    ``intensity`` (float32 ``[row, col, channel]``, linear, 1.0 = the camera's full scale,
    read-only) is computed from the samples on first use and kept; :meth:`crop` and
    :meth:`working` convert only what they need, so that a survey of a large image never holds
    a full-resolution float copy it does not use.
    """

    channels: tuple[str, ...]
    bit_depth: int
    path: str | None = None
    transfer: str = "linear"
    warnings: tuple[str, ...] = ()
    corrections: tuple[str, ...] = field(default=())
    samples: np.ndarray | None = field(default=None, repr=False)
    order: str = "rgb"  # channel order of the samples: "rgb", or "bgr" as OpenCV decodes
    scale: float = 1.0  # 16-bit: 1 / white level; float samples: 1
    white: float = 1.0  # raw sample value at which the camera saturates
    saturation: np.ndarray | None = field(default=None, repr=False)  # given mask, if any
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    # ---- saturation ---------------------------------------------------------------------

    def _sat_of(self, raw: np.ndarray) -> np.ndarray:
        if raw.shape[2] == 1:
            return raw[:, :, 0] >= self.white
        if raw.shape[2] == 3 and raw.dtype in (np.uint8, np.uint16):
            src = np.ascontiguousarray(raw)
            over = cv2.compare(src.reshape(src.shape[0], -1), self.white, cv2.CMP_GE)
            return cv2.transform(over.reshape(src.shape), np.ones((1, 3), np.float32)) > 0
        return raw.max(axis=2) >= self.white

    def _sat_block(self, raw: np.ndarray, f: int) -> np.ndarray:
        """Block-max saturation of raw samples over f x f pixels (any channel)."""
        from flakebook.imaging import _grid

        nch = raw.shape[2]
        if raw.dtype in (np.uint8, np.uint16):
            flat = np.ascontiguousarray(raw).reshape(raw.shape[0], -1)
            over = cv2.compare(flat, self.white, cv2.CMP_GE)
            return _grid.block_max(over, f, f * nch)
        return _grid.block_max(self._sat_of(raw), f)

    @property
    def saturated(self) -> np.ndarray:
        """Bool ``[row, col]``: True where any channel reached the camera's full scale."""
        if self.saturation is not None:
            return self.saturation
        sat = self._cache.get("sat")
        if sat is None:
            sat = self._sat_of(self.samples)
            sat.setflags(write=False)
            self._cache["sat"] = sat
        return sat

    def saturated_crop(self, rows: slice = slice(None), cols: slice = slice(None)) -> np.ndarray:
        """The saturation mask of ``[rows, cols]``."""
        if self.saturation is not None or "sat" in self._cache:
            return self.saturated[rows, cols]
        return self._sat_of(self.samples[rows, cols])

    def saturated_working(self, factor: int) -> np.ndarray:
        """True for working pixels (``factor`` x ``factor`` blocks) with any saturated pixel."""
        f = int(factor)
        key = ("satw", f)
        if key not in self._cache:
            if self.saturation is not None or "sat" in self._cache or f == 1:
                from flakebook.imaging import _grid

                self._cache[key] = _grid.block_max(self.saturated, f)
            else:
                self.working(f)
        return self._cache[key]

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols)."""
        return self.samples.shape[0], self.samples.shape[1]

    @property
    def height(self) -> int:
        return self.samples.shape[0]

    @property
    def width(self) -> int:
        return self.samples.shape[1]

    def _convert(self, raw: np.ndarray, reorder: bool = True) -> np.ndarray:
        """Linear float32 intensity ``[r, c, ch]`` of a block of samples (a new array), in RGB
        order (``reorder=False``: in the samples' order)."""
        if raw.dtype == np.uint8:
            lut = _SRGB_LUT_8 if self.transfer == "srgb" else _LINEAR_LUT_8
            src = np.ascontiguousarray(raw)
            lin = cv2.LUT(src, lut) if src.shape[2] in (1, 3, 4) else lut[src]
        elif raw.dtype == np.uint16:
            lin = raw.astype(np.float32)
            cv2.multiply(lin, float(self.scale), dst=lin)
            if self.transfer == "srgb":
                lin = srgb_to_linear(np.clip(lin, 0, 1)).astype(np.float32)
        else:
            lin = np.array(raw, dtype=np.float32)
        lin = lin.reshape(raw.shape[0], raw.shape[1], -1)
        if reorder and self.order == "bgr" and lin.shape[2] == 3:
            lin = np.ascontiguousarray(lin)
            cv2.cvtColor(lin, cv2.COLOR_BGR2RGB, dst=lin)
        return lin

    @property
    def linear_samples(self) -> bool:
        """True when the samples already are the linear float32 intensity."""
        return self.samples.dtype == np.float32 and self.scale == 1.0 and self.transfer == "linear"

    @property
    def intensity(self) -> np.ndarray:
        """Linear intensity, float32 ``[row, col, channel]`` (read-only)."""
        if self.linear_samples:
            return self.samples
        lin = self._cache.get("lin")
        if lin is None:
            lin = self._convert(self.samples)
            lin.setflags(write=False)
            self._cache["lin"] = lin
        return lin

    def crop(self, rows: slice = slice(None), cols: slice = slice(None)) -> np.ndarray:
        """Linear intensity of ``[rows, cols]`` (float32; a view when already converted)."""
        if self.linear_samples:
            return self.samples[rows, cols]
        lin = self._cache.get("lin")
        if lin is not None:
            return lin[rows, cols]
        return self._convert(self.samples[rows, cols])

    def crop_at(self, ys: np.ndarray, xs: np.ndarray) -> np.ndarray:
        """Linear intensity ``[point, ch]`` of the pixels at rows ``ys`` and columns ``xs``
        (float32; the same values as :meth:`crop` gives at those pixels)."""
        if self.linear_samples:
            return self.samples[ys, xs]
        lin = self._cache.get("lin")
        if lin is not None:
            return lin[ys, xs]
        raw = self.samples[ys, xs]
        return self._convert(raw.reshape(len(raw), 1, -1)).reshape(len(raw), -1)

    def working(self, factor: int) -> np.ndarray:
        """Block means of the linear intensity over ``factor`` x ``factor`` pixels (kept).

        Converted band by band, so no full-resolution float copy is made.
        """
        f = int(factor)
        key = ("work", f)
        if key in self._cache:
            return self._cache[key]
        from flakebook.imaging import _grid

        if f == 1 or self.linear_samples or "lin" in self._cache:
            out = _grid.downsample(self.intensity, f)
        else:
            # Band by band: linear intensity and saturation of each band, block-averaged.
            rows, cols = self.shape[0] // f, self.shape[1] // f
            out = np.empty((rows, cols, len(self.channels)), np.float32)
            sat = np.empty((rows, cols), bool)
            known = self.saturation is not None or "sat" in self._cache
            band = f * max(1, 48 // f)
            for r0 in range(0, rows * f, band):
                r1 = min(r0 + band, rows * f)
                raw = self.samples[r0:r1, : cols * f]
                lin = self._convert(raw, reorder=False)
                small = cv2.resize(lin, (cols, (r1 - r0) // f), interpolation=cv2.INTER_AREA)
                small = small.reshape(out[r0 // f : r1 // f].shape)
                if self.order == "bgr" and small.shape[2] == 3:
                    small = small[:, :, ::-1]
                out[r0 // f : r1 // f] = small
                if not known:
                    sat[r0 // f : r1 // f] = self._sat_block(raw, f)
            if not known:
                sat.setflags(write=False)
                self._cache[("satw", f)] = sat
        out.setflags(write=False)
        self._cache[key] = out
        return out


def with_intensity(image: Micrograph, intensity: np.ndarray, **changes) -> Micrograph:
    """A copy of ``image`` whose intensity is the given linear float32 array."""
    from dataclasses import replace

    lin = np.asarray(intensity, np.float32)
    if lin.ndim == 2:
        lin = lin[:, :, None]
    lin.setflags(write=False)
    return replace(
        image,
        samples=lin,
        order="rgb",
        scale=1.0,
        white=1.0,
        transfer="linear",
        saturation=image.saturated,
        _cache={},
        **changes,
    )


# ---- the sRGB transfer function (IEC 61966-2-1:1999) ---------------------------------------


def srgb_to_linear(v: np.ndarray | float) -> np.ndarray:
    """Undo the sRGB transfer function (IEC 61966-2-1:1999, section 5.2).

    ``v`` is the encoded value in [0, 1]; returns linear intensity in [0, 1]:
    ``v / 12.92`` for ``v <= 0.04045``, else ``((v + 0.055) / 1.055) ** 2.4``.
    """
    v = np.asarray(v, dtype=np.float64)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def linear_to_srgb(v: np.ndarray | float) -> np.ndarray:
    """The sRGB transfer function (IEC 61966-2-1:1999): linear [0, 1] to encoded [0, 1]."""
    v = np.asarray(v, dtype=np.float64)
    return np.where(v <= 0.0031308, 12.92 * v, 1.055 * np.power(np.maximum(v, 0), 1 / 2.4) - 0.055)


_SRGB_LUT_8 = srgb_to_linear(np.arange(256) / 255.0).astype(np.float32)
_LINEAR_LUT_8 = (np.arange(256) / 255.0).astype(np.float32)


# ---- header inspection (no decoding) ---------------------------------------------------------


@dataclass(frozen=True)
class ImageHeader:
    """What a file's header says, read without decoding the pixels."""

    format: str  # "png", "jpeg", "tiff", "bmp"
    width: int
    height: int
    pages: int = 1


def _refuse(path: str, what: str) -> InputError:
    return InputError(f"{path}: {what}; accepted: {_ACCEPTED}")


def _png_header(path: str, data: bytes, size: int) -> ImageHeader:
    if len(data) < 33 or data[12:16] != b"IHDR":
        raise _refuse(path, "PNG file without a valid IHDR header (truncated or damaged)")
    width, height = struct.unpack(">II", data[16:24])
    return ImageHeader("png", width, height)


def _jpeg_header(path: str, fh, size: int) -> ImageHeader:
    fh.seek(2)
    sof = {0xC0, 0xC1, 0xC2, 0xC3, 0xC5, 0xC6, 0xC7, 0xC9, 0xCA, 0xCB, 0xCD, 0xCE, 0xCF}
    while True:
        b = fh.read(1)
        if not b:
            raise _refuse(path, "JPEG file ends before its frame header (truncated or damaged)")
        if b != b"\xff":
            continue
        marker = fh.read(1)
        while marker == b"\xff":
            marker = fh.read(1)
        if not marker:
            raise _refuse(path, "JPEG file ends before its frame header (truncated or damaged)")
        m = marker[0]
        if m in (0xD8, 0x01) or 0xD0 <= m <= 0xD7:
            continue
        seglen = fh.read(2)
        if len(seglen) < 2:
            raise _refuse(path, "JPEG file ends inside a header segment (truncated)")
        (length,) = struct.unpack(">H", seglen)
        if m in sof:
            seg = fh.read(5)
            if len(seg) < 5:
                raise _refuse(path, "JPEG frame header is cut short (truncated)")
            _, height, width = struct.unpack(">BHH", seg)
            return ImageHeader("jpeg", width, height)
        if m == 0xDA:
            raise _refuse(path, "JPEG file has image data before any frame header (damaged)")
        fh.seek(length - 2, os.SEEK_CUR)


def _tiff_header(path: str, fh, size: int) -> ImageHeader:
    fh.seek(0)
    head = fh.read(16)
    endian = "<" if head[:2] == b"II" else ">"
    magic = struct.unpack(endian + "H", head[2:4])[0]
    big = magic == 43
    if len(head) < (16 if big else 8):
        raise _refuse(
            path,
            f"TIFF file of {size} bytes, shorter than its {16 if big else 8}-byte header "
            "(truncated)",
        )
    if big:
        (offset,) = struct.unpack(endian + "Q", head[8:16])
    else:
        (offset,) = struct.unpack(endian + "I", head[4:8])
    width = height = None
    pages = 0
    seen = set()
    while offset and pages < 10_000:
        if offset in seen or offset >= size:
            if pages == 0:
                raise _refuse(
                    path, "TIFF file whose first directory lies beyond its end (truncated)"
                )
            break
        seen.add(offset)
        fh.seek(offset)
        raw = fh.read(8 if big else 2)
        if len(raw) < (8 if big else 2):
            break
        (count,) = struct.unpack(endian + ("Q" if big else "H"), raw)
        entry = 20 if big else 12
        entries = fh.read(entry * count)
        if len(entries) < entry * count:
            if pages == 0:
                raise _refuse(path, "TIFF directory is cut short (truncated)")
            break
        if pages == 0:
            for i in range(count):
                e = entries[i * entry : (i + 1) * entry]
                tag, typ = struct.unpack(endian + "HH", e[:4])
                if tag not in (256, 257):
                    continue
                val = e[12:] if big else e[8:]
                if typ == 3:
                    v = struct.unpack(endian + "H", val[:2])[0]
                elif typ == 16:
                    v = struct.unpack(endian + "Q", val[:8])[0]
                else:
                    v = struct.unpack(endian + "I", val[:4])[0]
                if tag == 256:
                    width = v
                else:
                    height = v
        pages += 1
        nxt = fh.read(8 if big else 4)
        if len(nxt) < (8 if big else 4):
            break
        (offset,) = struct.unpack(endian + ("Q" if big else "I"), nxt)
    if width is None or height is None:
        raise _refuse(path, "TIFF file without image width and length in its first directory")
    return ImageHeader("tiff", width, height, max(pages, 1))


#: Largest BMP accepted, in pixels: an uncompressed format, so 100 megapixels is already a
#: 300 MB file; the decoder allocates the size the header claims before reading any pixel.
MAX_BMP_PIXELS = 100_000_000


def _bmp_header(path: str, data: bytes, size: int) -> ImageHeader:
    """Dimensions of a BMP (a 12-byte core header or a 40-byte or longer info header), refused
    when they exceed :data:`MAX_BMP_PIXELS` or what the file's size can hold."""
    if len(data) < 26:
        raise _refuse(path, "BMP file without a complete header (truncated)")
    (offset,) = struct.unpack("<I", data[10:14])
    (hsize,) = struct.unpack("<I", data[14:18])
    compression = 0
    if hsize == 12:
        width, height, _, bpp = struct.unpack("<HHHH", data[18:26])
    else:
        if len(data) < 34:
            raise _refuse(path, "BMP header is cut short (truncated)")
        width, height, _, bpp, compression = struct.unpack("<iiHHI", data[18:34])
    width, height = abs(width), abs(height)
    claimed = f"its header claims {width} x {height} pixels"
    if width * height > MAX_BMP_PIXELS:
        raise InputError(
            f"{path}: {claimed}, more than the {MAX_BMP_PIXELS:,} accepted for a BMP (a damaged "
            "header or a stitched mosaic); accepted: split it into tiles, or save it as TIFF"
        )
    if compression in (0, 3, 6) and bpp in (1, 4, 8, 16, 24, 32):  # uncompressed rows
        stride = (width * bpp + 31) // 32 * 4
        need = offset + stride * height
        if need > size:
            raise InputError(
                f"{path}: {claimed}, which needs {need:,} bytes, but the file has {size:,} "
                f"(damaged or truncated); accepted: {_ACCEPTED}"
            )
    return ImageHeader("bmp", width, height)


def read_header(path: str | os.PathLike) -> ImageHeader:
    """Format and dimensions of an image file from its header, without decoding it.

    Raises :class:`InputError` for a missing, empty, unrecognised or damaged file.
    """
    p = str(path)
    try:
        size = os.path.getsize(p)
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); accepted: {_ACCEPTED}"
        ) from None
    if size == 0:
        raise _refuse(p, "the file is empty (0 bytes)")
    try:
        with open(p, "rb") as fh:
            data = fh.read(64)
            if data.startswith(b"\x89PNG\r\n\x1a\n"):
                head = _png_header(p, data, size)
            elif data.startswith(b"\xff\xd8"):
                head = _jpeg_header(p, fh, size)
            elif data[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
                head = _tiff_header(p, fh, size)
            elif data.startswith(b"BM"):
                head = _bmp_header(p, data, size)
            else:
                kind = "text" if _looks_like_text(data) else "data of an unknown kind"
                raise _refuse(p, f"not an image file: it holds {kind}")
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); accepted: {_ACCEPTED}"
        ) from None
    except struct.error:  # a header field cut off by the end of the file
        raise _refuse(p, "the file's header is cut short (truncated or damaged)") from None
    if head.width == 0 or head.height == 0:
        raise _refuse(p, f"the image has zero size ({head.width} x {head.height} pixels)")
    return head


def _looks_like_text(data: bytes) -> bool:
    try:
        data.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return all(c >= 9 for c in data)


def _ends_complete(path: str, fmt: str) -> bool:
    """Whether a PNG ends with its IEND chunk / a JPEG with its EOI marker."""
    if fmt not in ("png", "jpeg"):
        return True
    with open(path, "rb") as fh:
        fh.seek(0, os.SEEK_END)
        size = fh.tell()
        fh.seek(max(0, size - 64))
        tail = fh.read()
    if fmt == "png":
        return b"IEND" in tail
    return b"\xff\xd9" in tail


# ---- reading ---------------------------------------------------------------------------------


def read_image(
    path: str | os.PathLike,
    *,
    transfer: str = "auto",
    max_pixels: int = MAX_PIXELS,
    white_level: int | None = None,
) -> Micrograph:
    """Read a micrograph file into linear intensity.

    Args:
        path: a PNG, JPEG, TIFF or BMP file, 8 or 16 bits per sample, RGB or monochrome.
            A multi-page TIFF gives its first page (with a warning).
        transfer: ``"auto"`` (8-bit: sRGB; 16-bit: linear), ``"srgb"`` or ``"linear"``.
        max_pixels: refuse images with more pixels than this (checked from the header).
        white_level: the raw value at which the camera saturates (default: the full scale of the
            bit depth, 255 or 65535); pixels at or above it in any channel are masked.

    Returns:
        A :class:`Micrograph` with intensity as a fraction of ``white_level``.

    Raises:
        InputError: unreadable, empty, zero-size, truncated, mislabelled or too large files.
    """
    p = str(path)
    head = read_header(p)
    if head.width * head.height > max_pixels:
        raise InputError(
            f"{p}: {head.width} x {head.height} pixels is more than the {max_pixels:,} accepted "
            "(a decompression bomb or a stitched mosaic); accepted: split it into tiles"
        )
    if not _ends_complete(p, head.format):
        raise _refuse(p, f"the {head.format.upper()} file is truncated (its end marker is missing)")
    warnings: list[str] = []
    if head.format == "tiff" and head.pages > 1:
        ok, pages = cv2.imreadmulti(p, start=0, count=1, flags=cv2.IMREAD_UNCHANGED)
        raw = pages[0] if ok and pages else None
        warnings.append(f"multi-page TIFF with {head.pages} pages: only the first page was read")
    else:
        raw = cv2.imread(p, cv2.IMREAD_UNCHANGED)
    if raw is None or raw.size == 0:
        raise _refuse(
            p, f"the {head.format.upper()} data could not be decoded (damaged or truncated)"
        )
    if raw.shape[0] != head.height or raw.shape[1] != head.width:
        raise _refuse(p, "decoded size differs from the header (damaged file)")
    img = from_array(
        raw, order="bgr", transfer=transfer, white_level=white_level, path=p, copy=False
    )
    if warnings:
        img = _with_warnings(img, warnings)
    return img


def _with_warnings(img: Micrograph, extra: list[str]) -> Micrograph:
    from dataclasses import replace

    return replace(img, warnings=tuple(extra) + img.warnings)


def from_array(
    array: np.ndarray,
    *,
    order: str = "rgb",
    transfer: str = "auto",
    white_level: int | float | None = None,
    channels: tuple[str, ...] | None = None,
    path: str | None = None,
    copy: bool = True,
) -> Micrograph:
    """A :class:`Micrograph` from a decoded array (the input is not changed).

    Args:
        array: ``[row, col]`` or ``[row, col, channel]``; uint8, uint16, or float (already
            linear, 1.0 = full scale). Three channels are colour, four colour plus alpha (dropped).
        order: ``"rgb"`` or ``"bgr"`` (OpenCV's order) for colour arrays.
        transfer: ``"auto"`` (uint8: sRGB; uint16 and float: linear), ``"srgb"`` or ``"linear"``.
        white_level: raw saturation value (default: 255 or 65535; float data: none, so no pixel
            is masked unless one is given).
        channels: names for the channels (default ``r, g, b`` or ``mono``).
        path: recorded in the result.
        copy: False hands the array over (it may then be changed in place, e.g. BGR to RGB);
            by default the input is copied and never changed.
    """
    a = np.asarray(array)
    where = path or "image array"
    if a.ndim not in (2, 3) or a.shape[0] == 0 or a.shape[1] == 0:
        raise InputError(
            f"{where}: image of shape {a.shape} has no pixels; accepted: a 2-D (mono) or "
            "3-D [row, col, channel] array with at least one pixel"
        )
    if channels is not None and a.ndim == 3 and a.shape[2] != len(channels):
        raise InputError(f"{where}: {len(channels)} channel names for {a.shape[2]} channels")
    if channels is None and a.ndim == 3 and a.shape[2] == 4:
        a = a[:, :, :3]
    if a.ndim == 3 and a.shape[2] == 1:
        a = a[:, :, 0]
    if channels is None and a.ndim == 3 and a.shape[2] != 3:
        raise InputError(
            f"{where}: {a.shape[2]} channels without names; accepted: 1 (mono), 3 (RGB), "
            "4 (RGBA), or any number with their names given"
        )
    if transfer not in ("auto", "srgb", "linear"):
        raise InputError(f"transfer {transfer!r}; accepted: auto, srgb, linear")
    if a.dtype == np.uint8:
        bit_depth = 8
        full = 255
    elif a.dtype == np.uint16:
        bit_depth = 16
        full = 65535
    elif a.dtype.kind == "f":
        bit_depth = 32
        full = 1.0
    else:
        raise InputError(f"{where}: pixel type {a.dtype}; accepted: 8-bit, 16-bit or float")
    level = full if white_level is None else white_level
    if transfer == "auto":
        transfer = "srgb" if bit_depth == 8 else "linear"
    colour = a.ndim == 3
    order = "bgr" if colour and order == "bgr" and a.shape[2] == 3 else "rgb"
    if copy or not a.flags.c_contiguous:
        a = np.array(a, order="C", copy=True)  # never share (and so never change) the input
    # 8-bit: intensity relative to 255 (the white level only sets the saturation mask);
    # 16-bit: relative to the white level (a 12-bit camera in a 16-bit file saturates at 4095).
    samples = a if a.ndim == 3 else a[:, :, None]
    scale = 1.0 / float(level) if bit_depth == 16 else 1.0
    if bit_depth == 32:
        if order == "bgr":
            samples = np.ascontiguousarray(samples[:, :, ::-1])
            order = "rgb"
        if transfer == "srgb":
            samples = srgb_to_linear(np.clip(samples, 0, 1)).astype(np.float32)
            transfer = "linear"
        elif samples.dtype != np.float32:
            samples = samples.astype(np.float32)
        if white_level is not None and float(level) != 1.0:
            samples = (samples / np.float32(level)).astype(np.float32)
            level = 1.0
    names = tuple(channels) if channels else (("r", "g", "b") if colour else ("mono",))
    if len(names) != samples.shape[2]:
        raise InputError(f"{where}: {len(names)} channel names for {samples.shape[2]} channels")
    samples.setflags(write=False)
    return Micrograph(
        channels=tuple(names),
        bit_depth=bit_depth,
        path=None if path is None else str(Path(path)),
        transfer=transfer,
        warnings=(),
        samples=samples,
        order=order,
        scale=scale,
        # Float data (e.g. a scientific camera's TIFF) has no known full scale: nothing is
        # masked as saturated unless a white level is given.
        white=float(level) if (bit_depth != 32 or white_level is not None) else float("inf"),
    )


def wait_until_readable(
    path: str | os.PathLike,
    *,
    stable_s: float = 1.0,
    timeout_s: float = 60.0,
    poll_s: float = 0.2,
    cancel=None,
    sleep=None,
) -> Micrograph:
    """Wait until a file being written has a stable size and decodes, then read it.

    For a camera that saves into a watched folder. The size must stay the same for ``stable_s``
    seconds and the file must decode; the wait ends with :class:`InputError` after ``timeout_s``
    (the last error's message), or :class:`~flakebook.errors.Cancelled` when ``cancel`` is set.
    """
    import time

    from flakebook.errors import check_cancel

    sleep = sleep or time.sleep
    start = time.monotonic()
    last_size = -1
    stable_since = time.monotonic()
    last_error: InputError | None = None
    while True:
        check_cancel(cancel)
        now = time.monotonic()
        try:
            size = os.path.getsize(path)
        except OSError:
            size = -1
        if size != last_size:
            last_size = size
            stable_since = now
        elif size < 0 and now - stable_since >= stable_s:
            raise InputError(f"{path}: the file disappeared before it was complete")
        elif size > 0 and now - stable_since >= stable_s:
            try:
                return read_image(path)
            except InputError as exc:
                last_error = exc
                stable_since = now
        if now - start > timeout_s:
            raise InputError(
                f"{path}: still not a complete image after {timeout_s:g} s"
                + (f" ({short_reason(last_error)})" if last_error else "")
            )
        sleep(poll_s)


def short_reason(exc: Exception) -> str:
    """First line of an error message, without the file name."""
    text = str(exc).splitlines()[0]
    return text.split(": ", 1)[-1]
