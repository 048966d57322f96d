"""Reading source images and writing PNG files with their metadata.

Sources are normalised to integer RGB code values (uint8, or uint16 for
16-bit files) at the edge; nothing else in the program sees file formats.
PNGs are written with imagecodecs, which keeps 16-bit samples exactly in both
directions, and tagged with text chunks that record how they were made.
"""

from __future__ import annotations

import json
import os
import struct
import tempfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError

#: File endings that are treated as images when a folder is given.
IMAGE_SUFFIXES = {".png", ".jpg", ".jpeg", ".bmp", ".gif", ".tif", ".tiff", ".webp", ".tga"}

#: Text chunk keywords written into every output PNG.
TEXT_KEY = "crtfilter"

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@dataclass
class SourceImage:
    """A decoded source picture.

    Attributes
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3): RGB code values, unpremultiplied.
    alpha : numpy.ndarray or None
        float32, shape (H, W), coverage in [0, 1], when the file has transparency.
    bits : int
        8 or 16.
    notes : list of str
        What was done to normalise the file (e.g. palette expanded).
    """

    codes: np.ndarray
    alpha: np.ndarray | None = None
    bits: int = 8
    notes: list[str] = field(default_factory=list)


def _png_bit_depth(head: bytes) -> int | None:
    if head[:8] == _PNG_SIGNATURE and head[12:16] == b"IHDR":
        return head[24]
    return None


def read_image(path: str | os.PathLike) -> SourceImage:
    """Read an image file into RGB code values.

    Parameters
    ----------
    path : path-like

    Returns
    -------
    SourceImage

    Raises
    ------
    InputError
        For a missing, unreadable, empty or non-image file, naming the problem.
    """
    from PIL import Image, UnidentifiedImageError

    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = fh.read()
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not an image") from None
    except PermissionError:
        raise InputError(f"{path}: permission denied") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from None
    if not data:
        raise InputError(f"{path}: file is empty")
    if _png_bit_depth(data[:32]) == 16:
        return _read_png16(path, data)
    import io

    try:
        with Image.open(io.BytesIO(data)) as im:
            im.load()
            return _from_pillow(im)
    except UnidentifiedImageError:
        raise InputError(f"{path}: not an image Pillow can read") from None
    except Image.DecompressionBombError as exc:
        raise InputError(f"{path}: {exc}") from None
    except (OSError, SyntaxError, ValueError) as exc:
        raise InputError(f"{path}: damaged or truncated image ({exc})") from None


def _from_pillow(im) -> SourceImage:
    notes = []
    mode = im.mode
    if mode == "P":
        has_alpha = "transparency" in im.info
        im = im.convert("RGBA" if has_alpha else "RGB")
        notes.append("palette expanded")
        mode = im.mode
    if mode in ("1", "L", "LA", "RGB", "RGBA"):
        pass
    elif mode in ("I;16", "I;16B", "I;16L", "I"):
        arr = np.asarray(im).astype(np.int64)
        top = 65535 if arr.max() > 255 or mode.startswith("I;16") else 255
        arr = np.clip(arr, 0, top).astype(np.uint16 if top > 255 else np.uint8)
        return SourceImage(np.repeat(arr[..., None], 3, axis=2), bits=16 if top > 255 else 8,
                           notes=notes + ["grey expanded to RGB"])
    else:
        notes.append(f"converted from {mode} to RGB")
        im = im.convert("RGBA" if "A" in mode else "RGB")
        mode = im.mode
    if mode == "1":
        im = im.convert("L")
        mode = "L"
    arr = np.asarray(im)
    return _split_channels(arr, 8, notes)


def _split_channels(arr: np.ndarray, bits: int, notes: list[str]) -> SourceImage:
    if arr.ndim == 2:
        arr = arr[..., None]
    channels = arr.shape[2]
    alpha = None
    if channels in (2, 4):
        top = float(2**bits - 1)
        a = arr[..., -1]
        if a.min() < top:
            alpha = a.astype(np.float32) / np.float32(top)
        arr = arr[..., :-1]
        channels -= 1
    if channels == 1:
        arr = np.repeat(arr, 3, axis=2)
        notes.append("grey expanded to RGB")
    return SourceImage(np.ascontiguousarray(arr), alpha=alpha, bits=bits, notes=notes)


def _read_png16(path: Path, data: bytes) -> SourceImage:
    import imagecodecs

    try:
        arr = imagecodecs.png_decode(data)
    except Exception as exc:  # imagecodecs raises its own PngError types
        raise InputError(f"{path}: damaged or truncated PNG ({exc})") from None
    return _split_channels(arr.astype(np.uint16, copy=False), 16, ["16-bit samples kept"])


def data_folder(name: str, pattern: str) -> Path:
    """A folder of data shipped with the package: ``crtfilter/<name>`` once installed,
    ``<name>/`` beside the package in a checkout. ``pattern`` tells an installed
    folder that holds the data from an empty one."""
    here = Path(__file__).resolve().parent
    installed = here / name
    if installed.is_dir() and any(installed.glob(pattern)):
        return installed
    return here.parent / name


# --------------------------------------------------------------------------
# Writing


def _chunk(kind: bytes, body: bytes) -> bytes:
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def _itxt(keyword: str, text: str) -> bytes:
    body = keyword.encode("latin-1") + b"\0\0\0\0\0" + text.encode("utf-8")
    return _chunk(b"iTXt", body)


def encode_png(codes: np.ndarray, text: dict[str, str] | None = None, *, level: int = 2) -> bytes:
    """Encode RGB code values as PNG bytes, with iTXt chunks after IHDR.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3) or (H, W, 4).
    text : dict, optional
        Keyword -> text, stored as uncompressed iTXt chunks.
    level : int
        zlib compression level.

    Returns
    -------
    bytes
    """
    import imagecodecs

    data = imagecodecs.png_encode(np.ascontiguousarray(codes), level=level)
    if not text:
        return data
    ihdr_end = 8 + 4 + 4 + 13 + 4
    extra = b"".join(_itxt(k, v) for k, v in text.items())
    return data[:ihdr_end] + extra + data[ihdr_end:]


def write_atomic(path: str | os.PathLike, data: bytes) -> None:
    """Write bytes to ``path`` through a temporary file in the same folder.

    A crash leaves either the old file or the complete new one, never a part.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        # mkstemp makes the file private; give it the permissions a plain open would.
        umask = os.umask(0)
        os.umask(umask)
        os.fchmod(fd, 0o666 & ~umask)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def read_png_codes(path: str | os.PathLike) -> np.ndarray:
    """Decode a PNG's samples exactly, 8- or 16-bit.

    Returns
    -------
    numpy.ndarray
        uint8 or uint16, shape (H, W, C).
    """
    import imagecodecs

    arr = imagecodecs.png_decode(Path(path).read_bytes())
    return arr if arr.ndim == 3 else arr[..., None]


def read_png_text(path: str | os.PathLike) -> dict[str, str]:
    """Return the tEXt and iTXt chunks of a PNG file as a dict."""
    data = Path(path).read_bytes()
    if data[:8] != _PNG_SIGNATURE:
        raise InputError(f"{path}: not a PNG file")
    out = {}
    pos = 8
    while pos + 8 <= len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        if kind == b"tEXt":
            key, _, value = body.partition(b"\0")
            out[key.decode("latin-1")] = value.decode("latin-1")
        elif kind == b"iTXt":
            key, _, rest = body.partition(b"\0")
            compressed, _method = rest[0], rest[1]
            _lang, _, rest = rest[2:].partition(b"\0")
            _tkey, _, value = rest.partition(b"\0")
            if compressed:
                value = zlib.decompress(value)
            out[key.decode("latin-1")] = value.decode("utf-8")
        elif kind == b"IEND":
            break
        pos += 12 + length
    return out


def read_render_record(path: str | os.PathLike) -> dict | None:
    """Return the JSON record crtfilter stored in a PNG it wrote, or None."""
    text = read_png_text(path).get(TEXT_KEY)
    return json.loads(text) if text else None
