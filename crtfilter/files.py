"""Reading source images and writing PNG files with their metadata.

Sources are normalised to integer RGB code values (uint8, or uint16 for
16-bit files) at the edge; nothing else in the program sees file formats.
PNGs are written with imagecodecs, which keeps 16-bit samples exactly in both
directions, and tagged with text chunks that record how they were made.
"""

from __future__ import annotations

import json
import os
import re
import secrets
import struct
import zlib
from collections.abc import Iterable
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

#: Advice added to a refusal by the pixel limit, where the limit can be raised.
LIMIT_ADVICE = " (raise it with --max-pixels if the file is trusted)"

#: Largest preset file read: a preset is a few hundred bytes of TOML.
MAX_PRESET_BYTES = 1 << 20

#: Most bytes an input may have per pixel allowed, and what it may have besides: four
#: 32-bit samples a pixel is the most any layout read here stores uncompressed, and
#: 16 MiB leaves room for profiles and metadata (common practice, no source).
_BYTES_PER_PIXEL = 16
_METADATA_BYTES = 16 << 20


class PixelLimitError(InputError):
    """A picture over the pixel limit; ``bare`` is the message without :data:`LIMIT_ADVICE`."""

    bare = ""


def _refuse_irregular(path, st: os.stat_result, noun: str) -> None:
    import stat

    if stat.S_ISREG(st.st_mode):
        return
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{path}: is a folder, not {noun}")
    kinds = ((stat.S_ISFIFO, "a FIFO"), (stat.S_ISCHR, "a character device"),
             (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))
    kind = next((name for test, name in kinds if test(st.st_mode)), "not a file")
    raise InputError(f"{path}: is not a regular file ({kind})")


def _open_nonblocking(name, flags: int) -> int:
    # POSIX open(): O_NONBLOCK makes opening a FIFO for reading return at once
    # instead of waiting for a writer; O_NOCTTY keeps a terminal from becoming ours
    return os.open(name, flags | os.O_NONBLOCK | os.O_NOCTTY)


def open_regular(path: str | os.PathLike, *, noun: str = "a file", missing: str = "no such file",
                 missing_error: type[Exception] = InputError):
    """Open a regular file for reading; refuse anything else, without ever blocking.

    The path is looked at first (``stat`` never blocks), then opened with
    ``O_NONBLOCK`` and looked at again through the open file, so a FIFO, a
    device, a socket or a folder put there in between is refused too.

    Parameters
    ----------
    path : path-like
    noun : str
        What a folder given here is not (``"is a folder, not an image"``).
    missing, missing_error : str, exception class
        The message and error for a path that does not exist.

    Returns
    -------
    (file, os.stat_result)
        A binary file open for reading (in blocking mode again) and its status.

    Raises
    ------
    InputError
        ``FILE: is not a regular file (a FIFO)``, ``FILE: is a folder, not ...``,
        ``FILE: permission denied``, ``FILE: cannot read (...)``.
    """
    def refused(exc: OSError):
        if isinstance(exc, FileNotFoundError):
            return missing_error(f"{path}: {missing}")
        if isinstance(exc, PermissionError):
            return InputError(f"{path}: permission denied")
        return InputError(f"{path}: cannot read ({exc.strerror or exc})")

    try:
        _refuse_irregular(path, os.stat(path), noun)
        fh = open(path, "rb", opener=_open_nonblocking)
    except OSError as exc:
        raise refused(exc) from None
    try:
        st = os.fstat(fh.fileno())
        _refuse_irregular(path, st, noun)  # replaced between the two looks
        os.set_blocking(fh.fileno(), True)
    except OSError as exc:
        fh.close()
        raise refused(exc) from None
    except BaseException:
        fh.close()
        raise
    return fh, st


def read_regular(path: str | os.PathLike, limit: int | None, *, what: str = "file", **kinds) -> bytes:
    """All bytes of a regular file of at most ``limit`` bytes (see :func:`open_regular`).

    Raises
    ------
    InputError
        As :func:`open_regular`, and ``FILE: <what> is N bytes, more than the M allowed``.
    """
    fh, st = open_regular(path, **kinds)
    with fh:
        return _read_bounded(path, fh, st.st_size, limit, what)


def _read_bounded(path, fh, size: int, limit: int | None, what: str, advice: str = "") -> bytes:
    def too_large(n: str) -> InputError:
        return InputError(f"{path}: {what} is {n} bytes, more than the {limit} allowed{advice}")

    if limit is not None and size > limit:
        raise too_large(str(size))
    try:
        # ask for what the file holds (plus one byte, to see it grew), never for the whole
        # limit: a read asks the allocator for all it may return, which a memory limit refuses
        first = fh.read(size + 1 if limit is None else min(size, limit) + 1)
        parts = [first]
        total = len(first)
        while parts[-1] and (limit is None or total <= limit):
            more = fh.read(1 << 20 if limit is None else min(1 << 20, limit + 1 - total))
            parts.append(more)
            total += len(more)
        data = b"".join(parts)
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.strerror or exc})") from None
    if limit is not None and len(data) > limit:  # grew since it was looked at
        raise too_large(f"over {limit}")
    return data


def read_image(path: str | os.PathLike, *, frame: int | None = None,
               max_pixels: int | None = DEFAULT_MAX_PIXELS) -> SourceImage:
    """Read an image file into RGB code values.

    Palette, grey, CMYK and other modes become RGB; 16-bit PNGs keep all 16
    bits; float and 32-bit integer samples are mapped onto 16-bit codes by the
    range the file declares (see :func:`_high_range_codes`); an embedded colour
    profile other than sRGB is converted to sRGB; EXIF orientation is applied;
    of an animated or multi-page file the first frame (or ``frame``) is taken.
    The size of the first frame and of every frame up to the one taken is
    checked against ``max_pixels`` before any of its pixels is decoded; only
    regular files are opened, and none larger than a picture within the
    limit can need.

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
        or one that is not a regular file, naming the problem.
    """
    import warnings

    from PIL import Image, UnidentifiedImageError

    path = Path(path)
    fh, st = open_regular(path, noun="an image")
    with fh:
        limit = None if max_pixels is None else max_pixels * _BYTES_PER_PIXEL + _METADATA_BYTES
        data = _read_bounded(path, fh, st.st_size, limit, "file", LIMIT_ADVICE)
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
        with warnings.catch_warnings(), Image.open(io.BytesIO(data)) as im:
            _check_size(path, im.width, im.height, max_pixels)
            # Past this point Pillow's own check, at our limit and as an error, guards
            # what decoding the frames before the one taken may allocate.
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            Image.MAX_IMAGE_PIXELS = max_pixels
            notes = _seek(path, im, frame, max_pixels)
            declared = _declared_samples(im)
            im.load()
            return _from_pillow(path, im, notes, declared)
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as exc:
        raise InputError(f"{path}: a frame is over the limit of {max_pixels} pixels ({exc})"
                         f"{LIMIT_ADVICE}") from None
    except UnidentifiedImageError:
        raise InputError(f"{path}: not an image Pillow can read") from None
    except (OSError, SyntaxError, ValueError, EOFError) as exc:
        raise InputError(f"{path}: damaged or truncated image ({exc})") from None
    finally:
        Image.MAX_IMAGE_PIXELS = saved


def peek_image(path: str | os.PathLike) -> tuple[int, int, int, bool] | None:
    """(width, height, bits, has alpha) of an image as :func:`read_image` would give it,
    from its header alone; None when the file cannot be read that way (also when it
    is not a regular file: it is never opened in a way that could block)."""
    from PIL import Image

    try:
        fh, _st = open_regular(path)
        with fh:
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
                bits = 16 if im.mode == "F" or im.mode.startswith("I") else 8  # see _high_range_codes
                return w, h, bits, alpha
    except Exception:  # the render itself will say what is wrong with the file
        return None


def _check_size(path: Path, w: int, h: int, max_pixels: int | None, what: str = "") -> None:
    if w < 1 or h < 1:
        raise InputError(f"{path}: {what}picture has no pixels ({w}x{h})")
    if max_pixels is not None and w * h > max_pixels:
        bare = f"{path}: {what}{w}x{h} = {w * h} pixels is over the limit of {max_pixels}"
        exc = PixelLimitError(bare + LIMIT_ADVICE)
        exc.bare = bare
        raise exc


def _seek(path: Path, im, frame: int | None, max_pixels: int | None = None) -> list[str]:
    frames = getattr(im, "n_frames", 1)
    if frame is not None and not (0 <= frame < frames):
        raise InputError(f"{path}: has {frames} frame{'s' if frames != 1 else ''}; "
                         f"frame must be 0 to {frames - 1} (got {frame})")
    if frames == 1:
        return []
    # One frame at a time, each frame's own size checked before it is decoded: a
    # multi-page TIFF may have a small first page and a huge second one, and an
    # animation may decode the frames before the one asked for.
    for k in range(1, (frame or 0) + 1):
        im.seek(k)
        _check_size(path, im.width, im.height, max_pixels, f"frame {k}: ")
    return [f"animated: frame {frame or 0} of {frames} taken"]


def _declared_samples(im) -> dict:
    """What a file says about its samples, read before Pillow decodes them.

    ``format`` and ``rawmode`` (Pillow's name for how the samples are stored);
    for a TIFF also ``bits`` (BitsPerSample, tag 258), ``sample_format``
    (SampleFormat, tag 339: 1 unsigned integer, 2 signed integer, 3 float) and
    the declared ranges ``s_range`` (SMinSampleValue and SMaxSampleValue, tags
    340 and 341) and ``range`` (MinSampleValue and MaxSampleValue, tags 280 and
    281; TIFF 6.0, from memory), each ``(low, high)`` or None.
    """
    tile = im.tile[0] if getattr(im, "tile", None) else ()
    args = tile[3] if len(tile) > 3 else None  # (decoder, extents, offset, args)
    rawmode = args if isinstance(args, str) else (args[0] if isinstance(args, tuple) and args
                                                  and isinstance(args[0], str) else None)
    out = {"format": im.format, "rawmode": rawmode, "bits": None, "sample_format": None,
           "s_range": None, "range": None}
    tags = getattr(im, "tag_v2", None)
    if tags is None:
        return out

    def numbers(tag: int) -> list[float] | None:
        value = tags.get(tag)
        if value is None:
            return None
        values = list(value) if isinstance(value, (tuple, list)) else [value]
        try:
            found = [float(v) for v in values if not isinstance(v, (bool, str, bytes))]
        except (TypeError, ValueError, ZeroDivisionError):
            found = []
        return found if found and len(found) == len(values) else []

    bits, fmt = numbers(258), numbers(339)
    out["bits"] = int(max(bits)) if bits else None
    out["sample_format"] = int(fmt[0]) if fmt else 1  # TIFF 6.0: SampleFormat defaults to 1 (from memory)
    low, high = numbers(340), numbers(341)
    if low is not None and high is not None:
        out["s_range"] = (min(low), max(high)) if low and high else ()
    high = numbers(281)
    if high is not None:
        low = numbers(280)
        out["range"] = ((min(low) if low else 0.0), max(high)) if high and low != [] else ()
    return out


def _high_range_codes(path: Path, im, declared: dict, notes: list[str]) -> np.ndarray:
    """Map float ('F') and integer ('I', 'I;16...') samples onto 16-bit codes, (H, W) uint16.

    - unsigned 16-bit samples are the codes, at full precision;
    - float samples: by the declared range (SMinSampleValue to SMaxSampleValue);
      without one, when every sample lies in [0, 1], by [0, 1]; otherwise, or
      with NaN or infinite samples, refused;
    - signed 16-bit and 32-bit integer samples: by the declared range
      (SMinSampleValue to SMaxSampleValue, else MinSampleValue to MaxSampleValue),
      or refused.

    The range's low end becomes code 0 and its high end 65535 (white, in the
    source transfer the settings name); samples outside it are clipped, with a note.
    """
    mode = im.mode
    arr = np.asarray(im)
    rawmode = declared.get("rawmode") or ""
    bits, fmt = declared.get("bits"), declared.get("sample_format")
    if mode == "F":
        kind = "float"
    elif declared.get("format") == "TIFF" and bits is not None:
        kind = f"{'signed ' if fmt == 2 else ''}{bits}-bit integer"
        if bits == 32 and fmt != 2:
            arr = arr.view(np.uint32)  # unsigned 32-bit samples, held by Pillow in int32
    elif mode.startswith("I;16") or rawmode.startswith("I;16") or declared.get("format") == "PPM":
        # Pillow's PPM reader scales samples of any maximum value to 0-65535
        kind = f"{'signed ' if rawmode.endswith('S') else ''}16-bit integer"
    else:
        kind = "32-bit integer"
    if kind == "16-bit integer":
        notes.append("16-bit samples kept")
        return np.clip(arr, 0, 65535).astype(np.uint16)
    if kind == "float":
        finite = np.isfinite(arr)
        if not finite.all():
            bad = int(arr.size - np.count_nonzero(finite))
            raise InputError(f"{path}: {bad} of {arr.size} float samples are NaN or infinite: "
                             f"they cannot be mapped onto codes")
        ranges = [("SMinSampleValue to SMaxSampleValue", declared.get("s_range"))]
    else:
        ranges = [("SMinSampleValue to SMaxSampleValue", declared.get("s_range")),
                  ("MinSampleValue to MaxSampleValue", declared.get("range"))]
    low = high = None
    for name, found in ranges:
        if found is None:
            continue
        if not found or not all(np.isfinite(found)) or not np.isfinite(found[1] - found[0]):
            raise InputError(f"{path}: its declared sample range ({name}) is not two finite numbers")
        low, high = found
        if not high > low:
            raise InputError(f"{path}: its declared sample range ({name}) {low:g} to {high:g} is empty")
        notes.append(f"{kind} samples mapped from their declared range {low:g} to {high:g} "
                     f"onto 16-bit codes")
        break
    if low is None:
        lo_found, hi_found = (arr.min(), arr.max()) if arr.size else (0, 0)
        if kind == "float" and 0 <= lo_found and hi_found <= 1:
            # common practice, no source: float pictures hold 0 (black) to 1 (white)
            low, high = 0.0, 1.0
            notes.append("float samples taken as 0 to 1 (the file declares no range) and mapped onto 16-bit codes")
        else:
            tags = ("" if declared.get("format") != "TIFF" else " (SMinSampleValue and SMaxSampleValue)"
                    if kind == "float" else " (SMinSampleValue and SMaxSampleValue, or MaxSampleValue)")
            more = "; without one only 0 to 1 is taken" if kind == "float" else ""
            raise InputError(f"{path}: {kind} samples run from {lo_found:.6g} to {hi_found:.6g} and the file "
                             f"declares no range{tags}{more}: cannot tell which value is white")
    codes, outside = _map_range(arr, low, high)
    if outside:
        notes.append(f"{outside} samples outside the declared range clipped")
    return codes


def _map_range(values: np.ndarray, low: float, high: float) -> tuple[np.ndarray, int]:
    """Samples from [low, high] onto codes 0 to 65535 (clipped, rounded to nearest), in
    bands so that no float64 copy of a whole picture is made; and how many were outside."""
    flat = np.ascontiguousarray(values).reshape(-1)
    out = np.empty(flat.size, np.uint16)
    outside = 0
    step = 1 << 20
    for start in range(0, flat.size, step):
        part = (flat[start:start + step].astype(np.float64) - low) / (high - low)
        outside += int(np.count_nonzero((part < 0) | (part > 1)))
        out[start:start + step] = np.rint(np.clip(part, 0.0, 1.0) * 65535.0)
    return out.reshape(values.shape), outside


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


def _from_pillow(path: Path, im, notes: list[str], declared: dict | None = None) -> SourceImage:
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
    if mode == "F" or mode.startswith("I"):
        codes = _high_range_codes(path, im, declared or {}, notes)
        if im.info.get("icc_profile"):
            notes.append(f"colour profile not applied to {mode} samples: taken as sRGB")
        return _split_channels(codes, 16, notes)
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
        (its repeats run along rows). 7 and 8 use libpng with every row filter
        tried: slower, smaller for smooth pictures. 9 makes both at level 9
        and keeps the smaller (sharp masked art is often smaller unfiltered).
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
    filtered = None
    if level >= 7:
        data = imagecodecs.png_encode(codes, level=level, filter=248)
        ihdr_end = 8 + 4 + 4 + 13 + 4
        filtered = data[:ihdr_end] + extra + data[ihdr_end:]
        if level < 9:
            return filtered
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
    plain = _PNG_SIGNATURE + _chunk(b"IHDR", ihdr) + extra + _chunk(b"IDAT", bytes(idat)) + _chunk(b"IEND", b"")
    return plain if filtered is None or len(plain) <= len(filtered) else filtered


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


_PART = re.compile(r"^\.(?P<name>.+)\.crtfilter-(?P<pid>[0-9]+)-[0-9a-f]{8}\.part$")


def _part_name(path: Path) -> Path:
    return path.parent / f".{path.name}.crtfilter-{os.getpid()}-{secrets.token_hex(4)}.part"


def write_atomic(path: str | os.PathLike, data: bytes, *, replace: bool = True) -> None:
    """Write bytes to ``path`` so that it is never seen half-written.

    The bytes go into an unnamed file in the target's folder (Linux
    ``O_TMPFILE``), which is given a name only once complete: a crash or kill
    leaves either the old file or the complete new one, and no temporary
    file. With ``replace`` the finished file is renamed over ``path`` (a
    symlink there is replaced, never followed); without it, it is linked into
    place, which fails if anything has that name by then, so two runs racing
    for one name cannot both write it. Where the file system has no unnamed
    files, a named ``.<name>.crtfilter-<pid>-<random>.part`` is used instead,
    removed on any error, and :func:`remove_stale_parts` clears one left by a
    killed run.

    Raises
    ------
    InputError
        Without ``replace``, when ``path`` exists.
    OSError
        When the folder cannot be written.
    """
    path = Path(path)
    umask = os.umask(0)
    os.umask(umask)
    mode = 0o666 & ~umask
    if not _write_unnamed(path, data, mode, replace):
        _write_named(path, data, mode, replace)


def _exists_error(path: Path) -> InputError:
    return InputError(f"{path}: exists (use --force to replace it)")


def _publish(tmp: Path, path: Path, replace: bool) -> None:
    """Give the finished file at ``tmp`` the name ``path``, and drop the name ``tmp``."""
    if replace:
        os.replace(tmp, path)
        return
    try:
        os.link(tmp, path, follow_symlinks=False)
    except FileExistsError:
        raise _exists_error(path) from None
    finally:
        _unlink_quietly(tmp)


def _open_unnamed(folder: Path, mode: int, flags: int = os.O_WRONLY) -> int | None:
    """An unnamed file in ``folder`` (Linux ``O_TMPFILE``), or None where there are none."""
    try:
        return os.open(folder, os.O_TMPFILE | flags, mode)
    except (AttributeError, OSError):
        return None


def _name_unnamed(fd: int, path: Path, replace: bool) -> None:
    """Give the complete unnamed file ``fd`` the name ``path`` (see :func:`write_atomic`).

    Raises OSError with the target untouched (the unnamed file goes with its fd).
    """
    tmp = _part_name(path)
    try:
        # linkat(AT_SYMLINK_FOLLOW) through /proc names the complete file; a
        # directory fd makes os.link use linkat rather than link.
        proc = os.open("/proc/self/fd", os.O_RDONLY | os.O_DIRECTORY)
        try:
            if replace:
                os.link(str(fd), tmp, src_dir_fd=proc, follow_symlinks=True)
            else:  # straight into place: fails if the name is taken
                try:
                    os.link(str(fd), path, src_dir_fd=proc, follow_symlinks=True)
                except FileExistsError:
                    raise _exists_error(path) from None
        finally:
            os.close(proc)
        if replace:
            os.replace(tmp, path)
    except InputError:
        raise
    except BaseException:  # an OSError, or Ctrl-C between naming and renaming
        _unlink_quietly(tmp)
        raise


def _write_unnamed(path: Path, data: bytes, mode: int, replace: bool) -> bool:
    fd = _open_unnamed(path.parent, mode)
    if fd is None:
        return False
    try:
        _write_all(fd, data)
        os.fsync(fd)
        _name_unnamed(fd, path, replace)
    except InputError:
        raise
    except OSError:
        return False  # the target is untouched
    finally:
        os.close(fd)
    return True


class PendingFile:
    """An output another process writes (an encoder, through :attr:`fd`), named only once
    it is complete and checked: :meth:`publish`; until then, and after :meth:`discard` or
    a crash, ``path`` is untouched and nothing is left behind (as :func:`write_atomic`).

    A context manager: leaving it by an exception discards the file.
    """

    def __init__(self, path: str | os.PathLike, *, replace: bool = True):
        self.path, self.replace = Path(path), replace
        umask = os.umask(0)
        os.umask(umask)
        self._mode = 0o666 & ~umask
        self.part: Path | None = None
        fd = _open_unnamed(self.path.parent, self._mode, os.O_RDWR)
        if fd is None:  # no unnamed files here: a named part, cleared on any error
            self.part = _part_name(self.path)
            fd = os.open(self.part, os.O_CREAT | os.O_EXCL | os.O_RDWR | os.O_NOFOLLOW, self._mode)
        self.fd: int | None = fd

    def open_for_reading(self) -> int:
        """A new descriptor that reads the file from its start (the caller closes it)."""
        return os.open(f"/proc/self/fd/{self.fd}" if self.part is None else self.part, os.O_RDONLY)

    def publish(self) -> None:
        """Name the complete file ``path``."""
        os.fsync(self.fd)
        try:
            if self.part is None:
                _name_unnamed(self.fd, self.path, self.replace)
            else:
                _publish(self.part, self.path, self.replace)
                self.part = None
        finally:
            self._close()

    def discard(self) -> None:
        self._close()
        if self.part is not None:
            _unlink_quietly(self.part)
            self.part = None

    def _close(self) -> None:
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None

    def __enter__(self) -> PendingFile:
        return self

    def __exit__(self, kind, exc, tb) -> bool:
        if kind is not None or self.fd is not None or self.part is not None:
            self.discard()
        return False


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def _write_named(path: Path, data: bytes, mode: int, replace: bool) -> None:
    tmp = _part_name(path)
    fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY | os.O_NOFOLLOW, mode)
    try:
        try:
            _write_all(fd, data)
            os.fsync(fd)
        finally:
            os.close(fd)
        _publish(tmp, path, replace)
    except BaseException:
        _unlink_quietly(tmp)
        raise


def _unlink_quietly(path: Path) -> None:
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


def remove_stale_parts(folder: str | os.PathLike, names: Iterable[str] | None = None) -> list[Path]:
    """Remove temporary files that a killed crtfilter run left in ``folder``.

    Only ``folder`` itself is looked at (not the folders below it), and only
    files named exactly as :func:`write_atomic` names them, whose process is
    gone; with ``names``, only those for outputs of these names.

    Returns
    -------
    list of Path
        What was removed.
    """
    wanted = None if names is None else set(names)
    removed = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        found = _PART.match(entry.name)
        if found is None or (wanted is not None and found["name"] not in wanted):
            continue
        try:
            if not entry.is_file(follow_symlinks=False):
                continue
            os.kill(int(found["pid"]), 0)
            continue  # still running: not ours to remove
        except ProcessLookupError:
            pass
        except (PermissionError, OverflowError, OSError):
            continue
        part = Path(entry.path)
        try:
            part.unlink()
            removed.append(part)
        except OSError:
            pass
    return removed


def read_png_codes(path: str | os.PathLike, *, max_pixels: int | None = None) -> np.ndarray:
    """Decode a PNG's samples exactly, 8- or 16-bit.

    With ``max_pixels`` the size its IHDR declares is checked before any pixel
    is decoded. Only a regular file is opened (see :func:`open_regular`).

    Returns
    -------
    numpy.ndarray
        uint8 or uint16, shape (H, W, C).

    Raises
    ------
    InputError
        For a file that is not a regular file, not a PNG, over the limit, or damaged.
    """
    import imagecodecs

    fh, st = open_regular(path)
    with fh:
        head = fh.read(24)
        # ISO/IEC 15948 (PNG), sec. 5.2 and 11.2.2: the signature, then IHDR with width and height
        if head[:8] != _PNG_SIGNATURE or head[12:16] != b"IHDR":
            raise InputError(f"{path}: not a PNG file")
        w, h = struct.unpack(">II", head[16:24])
        _check_size(Path(path), w, h, max_pixels)
        fh.seek(0)
        limit = None if max_pixels is None else max_pixels * _BYTES_PER_PIXEL + _METADATA_BYTES
        data = _read_bounded(path, fh, st.st_size, limit, "file")
    try:
        arr = imagecodecs.png_decode(data)
    except Exception as exc:  # imagecodecs raises its own PngError types
        raise InputError(f"{path}: damaged or truncated PNG ({exc})") from None
    return arr if arr.ndim == 3 else arr[..., None]


#: Most bytes one PNG text chunk may hold, as stored or once decompressed: a
#: crtfilter record is a few kilobytes.
MAX_TEXT_BYTES = 16 << 20

#: Most bytes of text read from one PNG, all text chunks together, as stored plus
#: what their compressed ones give.
MAX_TEXT_TOTAL = 64 << 20

#: Most chunks looked at in one PNG (their headers are 12 bytes each).
MAX_CHUNKS = 1 << 20

_TEXT_KINDS = (b"tEXt", b"zTXt", b"iTXt")


def read_png_text(path: str | os.PathLike) -> dict[str, str]:
    """Return the tEXt, zTXt and iTXt chunks of a PNG file as a dict.

    Only text chunks are read; the others are passed over. No chunk may hold
    more than :data:`MAX_TEXT_BYTES`, stored or decompressed (compressed text
    is inflated at most that far, never further), and all of them together no
    more than :data:`MAX_TEXT_TOTAL`.

    Raises
    ------
    InputError
        For a file that is not a regular file or not a PNG, a damaged or
        truncated text chunk, or one over the limits.
    """
    fh, _st = open_regular(path)
    out: dict[str, str] = {}
    total = 0
    with fh:
        if fh.read(8) != _PNG_SIGNATURE:
            raise InputError(f"{path}: not a PNG file")
        for _ in range(MAX_CHUNKS):
            # ISO/IEC 15948 (PNG), sec. 5.3: length, type, data, CRC
            head = fh.read(8)
            if len(head) < 8:
                return out
            length, kind = struct.unpack(">I4s", head)
            if kind == b"IEND":
                return out
            if kind not in _TEXT_KINDS:
                fh.seek(length + 4, os.SEEK_CUR)
                continue
            name = kind.decode("latin-1")
            if length > MAX_TEXT_BYTES:
                raise InputError(f"{path}: a {name} chunk of {length} bytes is larger than the "
                                 f"{MAX_TEXT_BYTES} bytes a text chunk may hold")
            total += length
            if total > MAX_TEXT_TOTAL:
                raise InputError(f"{path}: its text chunks hold more than {MAX_TEXT_TOTAL} bytes in all")
            body = fh.read(length)
            if len(body) < length:
                raise InputError(f"{path}: truncated {name} chunk")
            fh.seek(4, os.SEEK_CUR)
            key, value, inflated = _text_chunk(path, name, body, MAX_TEXT_TOTAL - total)
            total += inflated
            out[key] = value
    raise InputError(f"{path}: more than {MAX_CHUNKS} chunks")


def _text_chunk(path, name: str, body: bytes, left: int) -> tuple[str, str, int]:
    """(keyword, text, bytes inflated) of one text chunk's data; ``left``: bytes of text
    the file may still give."""
    # ISO/IEC 15948 (PNG), sec. 11.3.4: keyword, a zero byte, then for tEXt the text
    # (Latin-1); for zTXt a compression method and the compressed text (Latin-1); for
    # iTXt a compression flag and method, a language tag, a zero byte, a translated
    # keyword, a zero byte and the text (UTF-8), compressed when the flag is 1;
    # compression method 0 is zlib
    keyword, sep, rest = body.partition(b"\0")
    key = keyword.decode("latin-1")
    if not sep:
        raise InputError(f"{path}: damaged {name} chunk (no end to its keyword)")
    compressed, encoding = False, "latin-1"
    if name == "zTXt":
        if not rest or rest[0] != 0:
            raise InputError(f"{path}: text chunk {key!r} has an unknown compression method")
        compressed, data = True, rest[1:]
    elif name == "iTXt":
        if len(rest) < 2 or rest[0] not in (0, 1) or (rest[0] == 1 and rest[1] != 0):
            raise InputError(f"{path}: text chunk {key!r} has an unknown compression flag or method")
        _language, sep1, rest2 = rest[2:].partition(b"\0")
        _translated, sep2, data = rest2.partition(b"\0")
        if not (sep1 and sep2):
            raise InputError(f"{path}: damaged iTXt chunk {key!r}")
        compressed, encoding = rest[0] == 1, "utf-8"
    else:
        data = rest
    inflated = 0
    if compressed:
        data = _inflate(path, key, data, left)
        inflated = len(data)
    try:
        return key, data.decode(encoding), inflated
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: text chunk {key!r} is not UTF-8 text ({exc.reason} at byte {exc.start})") from None


def _inflate(path, key: str, data: bytes, left: int) -> bytearray:
    """zlib data inflated to at most :data:`MAX_TEXT_BYTES` (and ``left``), never further."""
    limit = max(0, min(MAX_TEXT_BYTES, left))
    inflater = zlib.decompressobj()
    text, pending = bytearray(), data
    try:
        # a MiB of output at a time (max_length), so that no more than the limit and
        # that piece is ever held, and no second copy of a whole buffer is made
        while len(text) <= limit:
            piece = inflater.decompress(pending, 1 << 20)
            text += piece
            pending = inflater.unconsumed_tail
            if inflater.eof or not (pending or piece):
                break
    except zlib.error as exc:
        raise InputError(f"{path}: text chunk {key!r} is damaged ({exc})") from None
    if len(text) > limit:
        if limit == MAX_TEXT_BYTES:
            raise InputError(f"{path}: text chunk {key!r} is larger than {MAX_TEXT_BYTES >> 20} MiB "
                             f"({MAX_TEXT_BYTES} bytes) when decompressed")
        raise InputError(f"{path}: its text chunks are larger than {MAX_TEXT_TOTAL >> 20} MiB in all "
                         f"when decompressed")
    if not inflater.eof:
        raise InputError(f"{path}: text chunk {key!r} is damaged (its compressed text is cut short)")
    return text


#: Deepest nesting of arrays and objects taken in a record (crtfilter writes four levels).
MAX_RECORD_DEPTH = 32


def _nested_deeper(value, limit: int) -> bool:
    """True when arrays and objects in ``value`` nest more than ``limit`` deep (a walk
    without recursion)."""
    stack = [(value, 1)]
    while stack:
        item, depth = stack.pop()
        if isinstance(item, (dict, list)):
            if depth > limit:
                return True
            stack.extend((x, depth + 1) for x in (item.values() if isinstance(item, dict) else item))
    return False


def _json_kind(value) -> str:
    return {dict: "an object", list: "an array", str: "a string", bool: "true or false",
            type(None): "null"}.get(type(value), "a number")


def read_render_record(path: str | os.PathLike) -> dict | None:
    """Return the JSON record crtfilter stored in a PNG it wrote, or None.

    Raises
    ------
    InputError
        As :func:`read_png_text`, and for a record that is not a JSON object.
    """
    text = read_png_text(path).get(TEXT_KEY)
    if not text:
        return None
    try:
        record = json.loads(text)
    except RecursionError:
        raise InputError(f"{path}: its {TEXT_KEY} record is nested too deeply to read") from None
    except ValueError as exc:
        raise InputError(f"{path}: its {TEXT_KEY} record is not JSON ({exc})") from None
    if not isinstance(record, dict):
        raise InputError(f"{path}: its {TEXT_KEY} record is not a JSON object (got {_json_kind(record)})")
    if _nested_deeper(record, MAX_RECORD_DEPTH):
        raise InputError(f"{path}: its {TEXT_KEY} record nests more than {MAX_RECORD_DEPTH} levels deep")
    return record
