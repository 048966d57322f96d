"""Output file formats: PNG (lossless, the default), and JPEG, WebP and AVIF through Pillow.

A rendered file carries its record: PNG in an ``iTXt`` chunk, the others in an XMP
packet (one element, ``crtfilter:record``, holding the JSON). A lossy file's figures
are measured on its decoded pixels, as a PNG's are on its own.
"""

from __future__ import annotations

import html
import io
import json
import os
import re
from pathlib import Path

import numpy as np

from .errors import InputError, SettingsError, check_choice

#: Format name -> (the ending it gets, Pillow's name for it).
FORMATS = {
    "png": (".png", "PNG"),
    "jpeg": (".jpg", "JPEG"),
    "webp": (".webp", "WEBP"),
    "avif": (".avif", "AVIF"),
}

#: Formats for clips only (:mod:`crtfilter.clips`): -> the ending they get. A clip
#: written as ``.png`` is an APNG, as ``.webp`` an animated WebP.
CLIP_FORMATS = {"apng": ".png", "mkv": ".mkv", "mp4": ".mp4"}

#: File endings -> format name.
ENDINGS = {".png": "png", ".jpg": "jpeg", ".jpeg": "jpeg", ".webp": "webp", ".avif": "avif",
           ".mkv": "mkv", ".mp4": "mp4"}

#: JPEG chroma subsampling by its usual name -> Pillow's code (0: none).
SUBSAMPLING = {"4:4:4": 0, "4:2:2": 1, "4:2:0": 2}

DEFAULT_QUALITY = 95

_XMP_NS = "https://crtfilter.invalid/ns/record/1.0/"
_RECORD = re.compile(rb"<crtfilter:record>(.*?)</crtfilter:record>", re.S)

#: JPEG keeps XMP in one APP1 segment of at most 65535 bytes, less its header.
_JPEG_XMP_ROOM = 65000


def available() -> list[str]:
    """The formats this installation can write (Pillow's build decides WebP and AVIF)."""
    from PIL import features

    names = ["png", "jpeg"]
    for name in ("webp", "avif"):
        try:
            if features.check(name):
                names.append(name)
        except (ValueError, KeyError):  # a Pillow that does not know the feature at all
            pass
    return names


def format_of(path: str | os.PathLike) -> str | None:
    """The format a file name's ending names, or None."""
    return ENDINGS.get(Path(path).suffix.lower())


def check_format(name: str) -> str:
    """A format name, checked against what this installation writes."""
    name = name.lower()
    if name == "jpg":
        name = "jpeg"
    if name in CLIP_FORMATS:  # written by the ffmpeg of imageio-ffmpeg, a dependency
        return name
    check_choice("format", name, list(FORMATS) + list(CLIP_FORMATS))
    if name not in available():
        raise SettingsError(f"format {name} cannot be written by this installation's Pillow "
                            f"(it writes: {', '.join(available())})")
    return name


def check_output(name: str, depth: int, hdr: bool, alpha: bool) -> None:
    """Refuse what a format cannot hold, with what to do instead."""
    if name == "png":
        return
    if hdr:
        raise SettingsError(f"HDR output is 16-bit PQ: write PNG, not {name.upper()}")
    if depth != 8:
        raise SettingsError(f"{name.upper()} holds 8 bits per sample: write PNG for depth 16")
    if alpha and name == "jpeg":
        raise SettingsError("JPEG has no transparency: write PNG, WebP or AVIF with --alpha keep")


def xmp_packet(record_json: str) -> bytes:
    """An XMP packet holding the record's JSON as the text of one element."""
    return ('<?xpacket begin="\ufeff" id="W5M0MpCehiHzreSzNTczkc9d"?>'
            '<x:xmpmeta xmlns:x="adobe:ns:meta/">'
            '<rdf:RDF xmlns:rdf="http://www.w3.org/1999/02/22-rdf-syntax-ns#">'
            f'<rdf:Description rdf:about="" xmlns:crtfilter="{_XMP_NS}">'
            f"<crtfilter:record>{html.escape(record_json, quote=False)}</crtfilter:record>"
            "</rdf:Description></rdf:RDF></x:xmpmeta>"
            '<?xpacket end="w"?>').encode("utf-8")


def record_from_xmp(xmp: bytes | str | None) -> dict | None:
    """The record an XMP packet written by :func:`xmp_packet` holds, or None."""
    if not xmp:
        return None
    if isinstance(xmp, str):
        xmp = xmp.encode("utf-8")
    found = _RECORD.search(xmp)
    if found is None:
        return None
    try:
        record = json.loads(html.unescape(found.group(1).decode("utf-8")))
    except (UnicodeDecodeError, ValueError, RecursionError):
        raise InputError("the crtfilter record in this file's XMP is not valid JSON") from None
    if not isinstance(record, dict):
        raise InputError("the crtfilter record in this file's XMP is not a JSON object")
    return record


def encode_lossy(codes: np.ndarray, name: str, record_json: str | None, *, quality: int = DEFAULT_QUALITY,
                 subsampling: str = "4:4:4") -> tuple[bytes, list[str]]:
    """Encode uint8 RGB or RGBA codes as JPEG, WebP or AVIF, with the record in XMP.

    Returns
    -------
    bytes, list of str
        The file's bytes, and notes (a record too large for a JPEG's XMP segment).
    """
    from PIL import Image

    if codes.dtype != np.uint8:
        raise SettingsError(f"{name.upper()} holds 8 bits per sample: write PNG for depth 16")
    if not 1 <= int(quality) <= 100:
        raise SettingsError(f"quality must be 1 to 100 (got {quality})")
    check_choice("subsampling", subsampling, list(SUBSAMPLING))
    notes: list[str] = []
    options: dict = {"quality": int(quality)}
    if record_json is not None:
        packet = xmp_packet(record_json)
        if name == "jpeg" and len(packet) > _JPEG_XMP_ROOM:
            notes.append("the record is too large for a JPEG's XMP segment and was left out")
        else:
            options["xmp"] = packet
    if name == "jpeg":
        options["subsampling"] = SUBSAMPLING[subsampling]
        options["optimize"] = True
    elif name == "webp":
        options["method"] = 4
        options["lossless"] = int(quality) == 100  # lossy WebP always halves the colour resolution
    elif name == "avif":
        options["subsampling"] = subsampling
        options["speed"] = 8  # 6, the encoder's default, takes about 9 s for a 4K frame here
    picture = Image.fromarray(np.ascontiguousarray(codes), "RGBA" if codes.shape[2] == 4 else "RGB")
    buffer = io.BytesIO()
    picture.save(buffer, FORMATS[name][1], **options)
    return buffer.getvalue(), notes


def decode_lossy(data: bytes) -> np.ndarray:
    """The uint8 codes a JPEG, WebP or AVIF file's bytes decode to (RGB, or RGBA if it has alpha)."""
    from PIL import Image

    with Image.open(io.BytesIO(data)) as im:
        im.load()
        mode = "RGBA" if "A" in im.getbands() else "RGB"
        return np.asarray(im.convert(mode))


def read_record(path: str | os.PathLike) -> dict | None:
    """The record a file crtfilter wrote carries (PNG, JPEG, WebP or AVIF), or None."""
    from .files import read_render_record

    path = Path(path)
    if format_of(path) in (None, "png"):
        return read_render_record(path)
    from PIL import Image, UnidentifiedImageError

    from .files import open_regular

    fh, _st = open_regular(path)  # never blocks on a pipe or a device
    with fh:
        try:
            with Image.open(fh) as im:
                xmp = im.info.get("xmp")
        except (OSError, UnidentifiedImageError, ValueError) as exc:
            raise InputError(f"{path}: cannot read this file ({exc})") from None
    try:
        return record_from_xmp(xmp)
    except InputError as exc:
        raise InputError(f"{path}: {exc}") from None


def add_record(data: bytes, name: str, record_json: str, *, quality: int = DEFAULT_QUALITY,
               codes: np.ndarray | None = None, subsampling: str = "4:4:4") -> tuple[bytes, list[str]]:
    """``data`` (a file :func:`encode_lossy` made without a record) with the record added.

    A JPEG gets an XMP segment spliced in after its JFIF header, so its
    compressed pixels stay byte for byte the same; WebP and AVIF are encoded
    again from ``codes`` with the record (the caller checks the pixels).
    """
    if name != "jpeg":
        return encode_lossy(codes, name, record_json, quality=quality, subsampling=subsampling)
    packet = b"http://ns.adobe.com/xap/1.0/\x00" + xmp_packet(record_json)
    if len(packet) + 2 > 0xFFFF:
        return data, ["the record is too large for a JPEG's XMP segment and was left out"]
    segment = b"\xff\xe1" + (len(packet) + 2).to_bytes(2, "big") + packet
    at = 2  # after SOI; after the APP0 (JFIF) segment when there is one, which must come first
    if data[2:4] == b"\xff\xe0":
        at = 4 + int.from_bytes(data[4:6], "big")
    return data[:at] + segment + data[at:], []


def read_lossy_codes(path: str | os.PathLike, max_pixels: int | None) -> np.ndarray:
    """The uint8 codes of a JPEG, WebP or AVIF file, its size checked before it is decoded."""
    from PIL import Image, UnidentifiedImageError

    from .files import open_regular

    path = Path(path)
    fh, _st = open_regular(path)
    with fh:
        try:
            with Image.open(fh) as im:
                w, h = im.size
                if max_pixels is not None and w * h > max_pixels:
                    raise InputError(f"{path}: {w}x{h} is {w * h} pixels, over the limit of {max_pixels}")
                im.load()
                return np.asarray(im.convert("RGBA" if "A" in im.getbands() else "RGB"))
        except (OSError, UnidentifiedImageError, ValueError) as exc:
            raise InputError(f"{path}: cannot decode this file ({exc})") from None


def light_moved_warning(fmt: str, quality: int, subsampling: str, moved: float) -> str:
    """The warning for a lossy file whose encoding moved the mean light by ``moved`` (a share),
    with what keeps it: the format's own lossless or unsubsampled mode, or PNG."""
    how = f"{fmt.upper()} at quality {quality}"
    if fmt == "webp":
        fix = "--quality 100 (lossless WebP) or PNG keeps it"
        how += " (colour at half resolution)"
    elif fmt in ("jpeg", "avif") and subsampling != "4:4:4":
        fix = "--subsampling 4:4:4 or PNG keeps it"
        how += f" {subsampling}"
    else:
        fix = "a higher --quality or PNG keeps it"
    return f"{how} moved the mean light by {100 * moved:+.1f} % (the figures are the file's): {fix}"
