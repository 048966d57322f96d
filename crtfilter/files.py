"""Reading source images and writing PNG files with their metadata.

Sources are normalised to integer RGB code values (uint8, or uint16 for
16-bit files) at the edge; nothing else in the program sees file formats.
PNGs are written with imagecodecs, which keeps 16-bit samples exactly in both
directions, and tagged with text chunks that record how they were made.
"""

from __future__ import annotations

import json
import os
import secrets
import struct
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
    profile : str or None
        Description of the embedded colour profile, if any.
    """

    codes: np.ndarray
    alpha: np.ndarray | None = None
    bits: int = 8
    notes: list[str] = field(default_factory=list)
    profile: str | None = None


def _png_bit_depth(head: bytes) -> int | None:
    if head[:8] == _PNG_SIGNATURE and head[12:16] == b"IHDR":
        return head[24]
    return None


#: Largest picture read without being asked for more: Pillow's own default limit.
DEFAULT_MAX_PIXELS = 89_478_485


def read_image(path: str | os.PathLike, *, frame: int | None = None,
               max_pixels: int | None = DEFAULT_MAX_PIXELS) -> SourceImage:
    """Read an image file into RGB code values.

    Palette, grey, CMYK and other modes become RGB; 16-bit PNGs keep all 16
    bits; an embedded colour profile other than sRGB is converted to sRGB;
    EXIF orientation is applied; of an animated file the first frame (or
    ``frame``) is taken. The size is checked against ``max_pixels`` before any
    pixel is decoded.

    Parameters
    ----------
    path : path-like
    frame : int, optional
        Frame of an animated file, from 0.
    max_pixels : int or None
        Refuse larger pictures (None: no limit).

    Returns
    -------
    SourceImage

    Raises
    ------
    InputError
        For a missing, unreadable, empty, damaged, too large or non-image file,
        naming the problem.
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
    if _png_bit_depth(data[:32]) == 16 and not frame:
        w, h = struct.unpack(">II", data[16:24])
        _check_size(path, w, h, max_pixels)
        return _read_png16(path, data)
    import io

    # Our own limit replaces Pillow's, which would only warn below twice its value.
    saved = Image.MAX_IMAGE_PIXELS
    Image.MAX_IMAGE_PIXELS = None
    try:
        with Image.open(io.BytesIO(data)) as im:
            _check_size(path, im.width, im.height, max_pixels)
            notes = _seek(path, im, frame)
            im.load()
            return _from_pillow(path, im, notes)
    except UnidentifiedImageError:
        raise InputError(f"{path}: not an image Pillow can read") from None
    except (OSError, SyntaxError, ValueError, EOFError) as exc:
        raise InputError(f"{path}: damaged or truncated image ({exc})") from None
    finally:
        Image.MAX_IMAGE_PIXELS = saved


def peek_image(path: str | os.PathLike) -> tuple[int, int, int, bool] | None:
    """(width, height, bits, has alpha) of an image as :func:`read_image` would give it,
    from its header alone; None when the file cannot be read that way."""
    from PIL import Image

    try:
        with open(path, "rb") as fh:
            head = fh.read(32)
            fh.seek(0)
            if _png_bit_depth(head) == 16:
                w, h = struct.unpack(">II", head[16:24])
                return w, h, 16, head[25] in (4, 6)  # grey + alpha, RGB + alpha
            with Image.open(fh) as im:
                w, h = im.size
                if im.getexif().get(0x0112, 1) in (5, 6, 7, 8):  # EXIF orientation turns it a quarter
                    w, h = h, w
                alpha = im.mode in ("RGBA", "LA", "PA", "La", "RGBa") or "transparency" in im.info
                return w, h, 8, alpha
    except Exception:  # the render itself will say what is wrong with the file
        return None


def _check_size(path: Path, w: int, h: int, max_pixels: int | None) -> None:
    if w < 1 or h < 1:
        raise InputError(f"{path}: picture has no pixels ({w}x{h})")
    if max_pixels is not None and w * h > max_pixels:
        raise InputError(f"{path}: {w}x{h} = {w * h} pixels is over the limit of {max_pixels} "
                         f"(raise it with --max-pixels if the file is trusted)")


def _seek(path: Path, im, frame: int | None) -> list[str]:
    frames = getattr(im, "n_frames", 1)
    if frame is not None and not (0 <= frame < frames):
        raise InputError(f"{path}: has {frames} frame{'s' if frames != 1 else ''}; "
                         f"frame must be 0 to {frames - 1} (got {frame})")
    if frames == 1:
        return []
    im.seek(frame or 0)
    return [f"animated: frame {frame or 0} of {frames} taken"]


def _to_srgb(path: Path, im, notes: list[str]):
    """Convert an image with an embedded colour profile to sRGB (RGB or RGBA mode)."""
    from PIL import ImageCms

    icc = im.info.get("icc_profile")
    if not icc:
        return im, None
    import io

    try:
        source = ImageCms.ImageCmsProfile(io.BytesIO(icc))
        name = (ImageCms.getProfileDescription(source) or "").strip() or "unnamed profile"
    except (ImageCms.PyCMSError, OSError, TypeError, ValueError):
        notes.append("embedded colour profile unreadable: taken as sRGB")
        return im, "unreadable"
    if name.lower().startswith("srgb"):
        return im, name
    alpha = im.getchannel("A") if im.mode in ("RGBA", "LA", "PA") else None
    mode_in = {"CMYK": "CMYK", "L": "L", "LA": "L", "I;16": None}.get(im.mode, "RGB")
    if mode_in is None:
        notes.append(f"colour profile {name!r} not applied to {im.mode} samples")
        return im, name
    try:
        converted = ImageCms.profileToProfile(im.convert(mode_in), source, ImageCms.createProfile("sRGB"),
                                              outputMode="RGB")
    except (ImageCms.PyCMSError, OSError, ValueError) as exc:
        notes.append(f"colour profile {name!r} could not be applied ({exc}): taken as sRGB")
        return im, name
    notes.append(f"converted from colour profile {name!r} to sRGB")
    if alpha is not None:
        converted.putalpha(alpha)
    return converted, name


def _from_pillow(path: Path, im, notes: list[str]) -> SourceImage:
    from PIL import ImageOps

    upright = ImageOps.exif_transpose(im)
    if upright is not None and upright is not im:
        orientation = im.getexif().get(0x0112, 1)
        if orientation not in (None, 1):
            notes.append(f"turned upright (EXIF orientation {orientation})")
        im = upright
    mode = im.mode
    if mode == "P" or mode == "PA":
        has_alpha = "transparency" in im.info or mode == "PA"
        im = im.convert("RGBA" if has_alpha else "RGB")
        notes.append("palette expanded" + (" with its transparency" if has_alpha else ""))
        mode = im.mode
    if mode in ("I;16", "I;16B", "I;16L", "I"):
        arr = np.asarray(im).astype(np.int64)
        top = 65535 if arr.max() > 255 or mode.startswith("I;16") else 255
        arr = np.clip(arr, 0, top).astype(np.uint16 if top > 255 else np.uint8)
        return _split_channels(arr, 16 if top > 255 else 8, notes)
    im, profile = _to_srgb(path, im, notes)
    mode = im.mode
    if mode == "1":
        im = im.convert("L")
    elif mode not in ("L", "LA", "RGB", "RGBA"):
        notes.append(f"converted from {mode} to RGB")
        im = im.convert("RGBA" if "A" in mode else "RGB")
    image = _split_channels(np.asarray(im), 8, notes)
    image.profile = profile
    return image


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
    notes = ["16-bit samples kept"]
    if b"iCCP" in data[:data.find(b"IDAT")]:
        notes.append("colour profile of a 16-bit PNG not applied: taken as sRGB")
    return _split_channels(arr.astype(np.uint16, copy=False), 16, notes)


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


#: Default PNG compression (see :func:`encode_png`), chosen by measurement on
#: rendered 2880x2160 frames: unfiltered rows through zlib-ng at level 4 took
#: 13-80 ms, where libpng at level 2 with adaptive filters took 90-150 ms and
#: Pillow's default 160-420 ms; files came out 0.8 to 1.6 times Pillow's size
#: (smaller for masked pixel art, larger for smooth pictures: use 9 for those).
DEFAULT_COMPRESSION = 4


def encode_png(codes: np.ndarray, text: dict[str, str] | None = None, *, level: int = DEFAULT_COMPRESSION,
               chunks: list[tuple[bytes, bytes]] | None = None) -> bytes:
    """Encode RGB code values as PNG bytes, with extra chunks and iTXt chunks after IHDR.

    Parameters
    ----------
    codes : numpy.ndarray
        uint8 or uint16, shape (H, W, 3) or (H, W, 4).
    text : dict, optional
        Keyword -> text, stored as uncompressed iTXt chunks.
    level : int
        0 to 9. Up to 6 the rows go unfiltered into zlib-ng at that level,
        written here: fast, and masked pixel art compresses well that way
        (its repeats run along rows). 7 to 9 use libpng with every row filter
        tried: slower, smaller for smooth pictures.
    chunks : list of (type, body), optional
        Chunks placed right after IHDR, before any palette or image data
        (where PNG wants colour information such as cICP and cLLI).

    Returns
    -------
    bytes
    """
    import imagecodecs

    level = int(level)
    if not (0 <= level <= 9):
        raise InputError(f"compression must be 0 to 9 (got {level})")
    codes = np.ascontiguousarray(codes)
    extra = b"".join(_chunk(kind, body) for kind, body in (chunks or []))
    extra += b"".join(_itxt(k, v) for k, v in (text or {}).items())
    if level >= 7:
        data = imagecodecs.png_encode(codes, level=level, filter=248)
        ihdr_end = 8 + 4 + 4 + 13 + 4
        return data[:ihdr_end] + extra + data[ihdr_end:]
    h, w = codes.shape[:2]
    channels = 1 if codes.ndim == 2 else codes.shape[2]
    colour_type = {1: 0, 2: 4, 3: 2, 4: 6}[channels]
    bits = 16 if codes.dtype == np.uint16 else 8
    rows = codes.reshape(h, -1)
    if bits == 16:
        rows = rows.astype(">u2").view(np.uint8)  # PNG stores 16-bit samples big-endian
    raw = np.empty((h, rows.shape[1] + 1), np.uint8)
    raw[:, 0] = 0  # filter type None on every row
    raw[:, 1:] = rows
    ihdr = struct.pack(">IIBBBBB", w, h, bits, colour_type, 0, 0, 0)
    idat = imagecodecs.zlibng_encode(raw, level=level)
    return _PNG_SIGNATURE + _chunk(b"IHDR", ihdr) + extra + _chunk(b"IDAT", bytes(idat)) + _chunk(b"IEND", b"")


def hdr_chunks(max_cll: float, max_fall: float) -> list[tuple[bytes, bytes]]:
    """cICP and cLLI chunk bodies for a PQ, BT.2020, full-range picture.

    cICP: colour primaries 9 (BT.2020), transfer 16 (PQ), matrix 0 (RGB),
    full range 1 (ITU-T H.273 code points; PNG Third Edition). cLLI: MaxCLL
    and MaxFALL in units of 0.0001 cd/m², as unsigned 32-bit big-endian.
    """
    def units(nits: float) -> int:
        return max(0, min(2**32 - 1, round(nits * 10000)))

    return [(b"cICP", bytes([9, 16, 0, 1])),
            (b"cLLI", struct.pack(">II", units(max_cll), units(max_fall)))]


def _part_name(path: Path) -> Path:
    return path.parent / f".{path.name}.crtfilter-{os.getpid()}-{secrets.token_hex(4)}.part"


def write_atomic(path: str | os.PathLike, data: bytes) -> None:
    """Write bytes to ``path`` so that it is never seen half-written.

    The bytes go into an unnamed file in the target's folder (Linux
    ``O_TMPFILE``), which is given a name only once complete and then renamed
    over ``path``: a crash or kill leaves either the old file or the complete
    new one, and no temporary file. Where the file system has no unnamed files,
    a named ``.<name>.crtfilter-<pid>-<random>.part`` is used instead, removed on
    any error, and :func:`remove_stale_parts` clears one left by a killed run.
    """
    path = Path(path)
    umask = os.umask(0)
    os.umask(umask)
    mode = 0o666 & ~umask
    if not _write_unnamed(path, data, mode):
        _write_named(path, data, mode)


def _write_unnamed(path: Path, data: bytes, mode: int) -> bool:
    try:
        fd = os.open(path.parent, os.O_TMPFILE | os.O_WRONLY, mode)
    except (AttributeError, OSError):
        return False
    tmp = _part_name(path)
    try:
        _write_all(fd, data)
        os.fsync(fd)
        # linkat(AT_SYMLINK_FOLLOW) through /proc names the complete file; a
        # directory fd makes os.link use linkat rather than link.
        proc = os.open("/proc/self/fd", os.O_RDONLY | os.O_DIRECTORY)
        try:
            os.link(str(fd), tmp, src_dir_fd=proc, follow_symlinks=True)
        finally:
            os.close(proc)
        os.replace(tmp, path)
    except OSError:
        _unlink_quietly(tmp)
        return False  # the target is untouched; the unnamed file goes with its fd
    except BaseException:  # Ctrl-C between naming and renaming
        _unlink_quietly(tmp)
        raise
    finally:
        os.close(fd)
    return True



def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def _write_named(path: Path, data: bytes, mode: int) -> None:
    tmp = _part_name(path)
    fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, mode)
    try:
        try:
            _write_all(fd, data)
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except BaseException:
        _unlink_quietly(tmp)
        raise


def _unlink_quietly(path: Path) -> None:
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


def remove_stale_parts(folder: str | os.PathLike) -> list[Path]:
    """Remove temporary files that a killed crtfilter run left in ``folder`` and below.

    Only files named by :func:`write_atomic` whose process is gone are removed.

    Returns
    -------
    list of Path
        What was removed.
    """
    removed = []
    for part in Path(folder).rglob(".*.crtfilter-*.part"):
        try:
            pid = int(part.name.rsplit(".crtfilter-", 1)[1].split("-", 1)[0])
        except (IndexError, ValueError):
            continue
        try:
            os.kill(pid, 0)
            continue  # still running: not ours to remove
        except ProcessLookupError:
            pass
        except PermissionError:
            continue
        try:
            part.unlink()
            removed.append(part)
        except OSError:
            pass
    return removed


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
