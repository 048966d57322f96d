"""Every reader bounded, and one clear line for bad input.

Text chunks are inflated only up to a cap; every frame that can be chosen is held
to the pixel limit before it is decoded; only regular files are opened, without
blocking; malformed records, pyproject tables and presets give one line naming the
file; float and 32-bit integer samples are mapped by their declared range or refused.
"""

from __future__ import annotations

import json
import os
import resource
import signal
import socket
import struct
import subprocess
import sys
import tempfile
import time
import tracemalloc
import zlib
from pathlib import Path

import numpy as np
import pytest
from conftest import TOL_ENERGY_FILE, colour_module, run
from PIL import Image
from PIL.TiffImagePlugin import ImageFileDirectory_v2

from crtfilter.errors import CrtfilterError, InputError, SettingsError
from crtfilter.files import (DEFAULT_MAX_PIXELS, MAX_PRESET_BYTES, MAX_TEXT_BYTES, MAX_TEXT_TOTAL, TEXT_KEY,
                             encode_png, peek_image, read_image, read_png_codes, read_png_text,
                             read_render_record)
from crtfilter.gate import config_from_pyproject
from crtfilter.presets import load_preset

W, H = 16, 12  # small sources; renders use --scale 2, so outputs are 32x24

#: Just over the default pixel limit, and small enough to allocate if a bug let it through.
OVER_W, OVER_H = 9500, 9500


# --------------------------------------------------------------------------
# Helpers: files drawn by hand


def png_chunk(kind: bytes, body: bytes) -> bytes:
    # ISO/IEC 15948 (PNG), sec. 5.3: length, type, data, CRC-32 of type and data
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def png_with_chunks(w: int, h: int, chunks: list[bytes], *, pixels: bool = True) -> bytes:
    """An 8-bit grey PNG of w x h with the given chunks after IHDR; with ``pixels``,
    black rows for a small picture, else one tiny IDAT (a huge declared size)."""
    # ISO/IEC 15948 (PNG), sec. 11.2.2: IHDR = width, height, bit depth, colour type 0 (grey), ...
    ihdr = png_chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 0, 0, 0, 0))
    rows = bytes((1 + w) * h) if pixels else bytes(1 + 16)
    idat = png_chunk(b"IDAT", zlib.compress(rows))
    return b"\x89PNG\r\n\x1a\n" + ihdr + b"".join(chunks) + idat + png_chunk(b"IEND", b"")


def itxt(key: str, data: bytes, compressed: bool) -> bytes:
    # ISO/IEC 15948 (PNG), sec. 11.3.4.5: keyword, 0, compression flag, method 0 (zlib),
    # language tag, 0, translated keyword, 0, text
    return png_chunk(b"iTXt", key.encode("latin-1") + b"\0" + bytes([int(compressed), 0]) + b"\0\0" + data)


def ztxt(key: str, data: bytes) -> bytes:
    # ISO/IEC 15948 (PNG), sec. 11.3.4.4: keyword, 0, compression method 0 (zlib), compressed text
    return png_chunk(b"zTXt", key.encode("latin-1") + b"\0\0" + data)


def deflated_zeros(total: int, step: int = 1 << 20) -> bytes:
    """``total`` zero bytes, deflated a piece at a time (never all held at once)."""
    packer = zlib.compressobj(6)
    piece = bytes(step)
    out = [packer.compress(piece) for _ in range(total // step)]
    return b"".join(out) + packer.compress(bytes(total % step)) + packer.flush()


# TIFF 6.0 (Adobe, 1992), sec. 2: field types; from memory
SHORT, LONG, SLONG, DOUBLE = 3, 4, 9, 12
_TYPE_FORMAT = {SHORT: "H", LONG: "I", SLONG: "i", DOUBLE: "d"}


def tiff(pages: list[dict]) -> bytes:
    """A little-endian, uncompressed, one-sample TIFF, one IFD per page.

    Each page: ``w``, ``h``, ``bits``, ``sample_format`` (1 unsigned, 2 signed,
    3 float), ``data`` (the strip's bytes; may be shorter than the size declares)
    and ``tags`` (extra ``(tag, type, values)``).
    """
    # TIFF 6.0, sec. 2: header "II", 42, offset of the first IFD; an IFD is a count,
    # 12-byte entries sorted by tag (tag, type, count, value or offset) and the next
    # IFD's offset; values of more than 4 bytes lie elsewhere. Tags from sec. 8 (baseline)
    # and sec. 19 (SampleFormat 339, SMinSampleValue 340, SMaxSampleValue 341); from memory
    out = bytearray(b"II*\0\0\0\0\0")
    first_ifd_at = 4
    for page in pages:
        data_at = len(out)
        out += page["data"]
        if len(out) % 2:
            out += b"\0"
        entries = [(256, LONG, [page["w"]]), (257, LONG, [page["h"]]), (258, SHORT, [page["bits"]]),
                   (259, SHORT, [1]), (262, SHORT, [1]), (273, LONG, [data_at]), (277, SHORT, [1]),
                   (278, LONG, [page["h"]]), (279, LONG, [len(page["data"])]),
                   (339, SHORT, [page.get("sample_format", 1)])] + list(page.get("tags", []))
        entries.sort()
        ifd_at = len(out)
        struct.pack_into("<I", out, first_ifd_at, ifd_at)
        extra_at = ifd_at + 2 + 12 * len(entries) + 4
        body, extra = bytearray(struct.pack("<H", len(entries))), bytearray()
        for tag, kind, values in entries:
            packed = struct.pack("<" + _TYPE_FORMAT[kind] * len(values), *values)
            if len(packed) <= 4:
                body += struct.pack("<HHI", tag, kind, len(values)) + packed.ljust(4, b"\0")
            else:
                body += struct.pack("<HHII", tag, kind, len(values), extra_at + len(extra))
                extra += packed
        first_ifd_at = ifd_at + len(body)
        out += body + b"\0\0\0\0" + extra
    return bytes(out)


def float_tiff(path: Path, values: np.ndarray, smin: float | None = None, smax: float | None = None) -> Path:
    """A float32 TIFF written by Pillow (mode 'F'), with SMinSampleValue/SMaxSampleValue if given."""
    im = Image.fromarray(values.astype(np.float32), "F")
    ifd = ImageFileDirectory_v2()
    if smin is not None:
        ifd[340] = smin
    if smax is not None:
        ifd[341] = smax
    im.save(path, tiffinfo=ifd)
    return path


def grey16_png(path: Path, code: int, w: int = W, h: int = H) -> Path:
    Image.fromarray(np.full((h, w), code, np.uint16)).save(path)  # Pillow writes uint16 as a 16-bit PNG
    return path


def one_error_line(stderr: str) -> str:
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, stderr
    assert lines[0].startswith("crtfilter: error: "), stderr
    assert "Traceback" not in stderr
    return lines[0]


def _held_to_2_gib() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (2 << 30, 2 << 30))


def cli(*args, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """The command in its own process, held to 20 s and 2 GiB of address space: a read that
    blocks, or one that reads a device to its end, fails the test instead of hanging it or
    filling the machine's memory."""
    return subprocess.run([sys.executable, "-m", "crtfilter", *map(str, args)], capture_output=True,
                          text=True, timeout=20, cwd=cwd, preexec_fn=_held_to_2_gib)


def child(code: str) -> list[str]:
    """Python ``code`` run as :func:`cli` runs the command; the lines it printed."""
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=20,
                            preexec_fn=_held_to_2_gib)
    assert result.returncode == 0, result.stderr
    return result.stdout.splitlines()


@pytest.fixture
def no_blocking():
    """A read that blocks raises after 10 s (SIGALRM) instead of hanging the run."""
    def expire(signum, frame):
        raise TimeoutError("blocked for 10 s")

    before = signal.signal(signal.SIGALRM, expire)
    signal.alarm(10)
    yield
    signal.alarm(0)
    signal.signal(signal.SIGALRM, before)


@pytest.fixture
def source(tmp_path) -> Path:
    path = tmp_path / "in" / "frame.png"
    path.parent.mkdir()
    rng = np.random.default_rng(7)
    Image.fromarray(rng.integers(0, 256, (H, W, 3), dtype=np.uint8), "RGB").save(path)
    return path


@pytest.fixture
def rendered(source, tmp_path) -> Path:
    out = tmp_path / "out.png"
    result = run("render", source, "-o", out, "--scale", 2)
    assert result.exit_code == 0, result.stderr
    return out


# --------------------------------------------------------------------------
# 1. Text chunks read with a cap


@pytest.fixture(scope="module")
def bomb_200mib() -> bytes:
    return deflated_zeros(200 << 20)


def _peak_bytes(call) -> tuple[object, int]:
    tracemalloc.start()
    try:
        try:
            outcome = call()
        except CrtfilterError as exc:
            outcome = exc
        return outcome, tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("chunk", ["iTXt", "zTXt"])
def test_compressed_text_bomb_is_refused_after_at_most_the_cap(tmp_path, bomb_200mib, chunk):
    path = tmp_path / "bomb.png"
    made = itxt(TEXT_KEY, bomb_200mib, True) if chunk == "iTXt" else ztxt(TEXT_KEY, bomb_200mib)
    path.write_bytes(png_with_chunks(W, H, [made]))
    assert path.stat().st_size < 1 << 20  # 200 MiB of zeros deflate to a fraction of a MiB
    outcome, peak = _peak_bytes(lambda: read_png_text(path))
    assert isinstance(outcome, InputError)
    assert str(outcome).startswith(f"{path}: text chunk 'crtfilter' is larger than 16 MiB")
    assert "when decompressed" in str(outcome)
    # the cap is 16 MiB of output: far below the 200 MiB the chunk would give
    assert peak < MAX_TEXT_BYTES + (8 << 20), peak


def test_inspect_of_a_text_bomb_is_one_line_and_status_2(tmp_path, bomb_200mib):
    path = tmp_path / "bomb.png"
    path.write_bytes(png_with_chunks(W, H, [itxt(TEXT_KEY, bomb_200mib, True)]))
    result = run("inspect", path)
    assert result.exit_code == 2
    assert "text chunk 'crtfilter' is larger than 16 MiB" in one_error_line(result.stderr)


def test_text_chunk_declaring_more_than_the_cap_is_refused_before_it_is_read(tmp_path):
    # a tEXt chunk whose length field says 100 MiB, in a file of a few hundred bytes
    head = png_with_chunks(W, H, [])
    chunk = struct.pack(">I", 100 << 20) + b"tEXt" + b"crtfilter\0" + b"x" * 100
    path = tmp_path / "long.png"
    path.write_bytes(head[:33] + chunk)
    outcome, peak = _peak_bytes(lambda: read_png_text(path))
    assert isinstance(outcome, InputError)
    assert f"tEXt chunk of {100 << 20} bytes is larger than the {MAX_TEXT_BYTES} bytes" in str(outcome)
    assert peak < 1 << 20


def test_text_chunks_together_are_held_to_the_total_cap(tmp_path):
    piece = deflated_zeros(15 << 20)  # under the cap for one chunk
    count = MAX_TEXT_TOTAL // (15 << 20) + 1
    path = tmp_path / "many.png"
    path.write_bytes(png_with_chunks(W, H, [itxt(f"note{i}", piece, True) for i in range(count)]))
    with pytest.raises(InputError, match=r"text chunks are larger than 64 MiB in all when decompressed"):
        read_png_text(path)


def test_text_under_the_caps_reads_back_exactly_in_every_kind_of_chunk(tmp_path):
    words = ("level 3: the salt flats at dusk " * 40000).encode()  # about 1.3 MB
    path = tmp_path / "text.png"
    path.write_bytes(png_with_chunks(W, H, [
        png_chunk(b"tEXt", b"plain\0caf\xe9"),  # Latin-1
        ztxt("packed", zlib.compress(words)),
        itxt("wide", "dune \u2014 yacht".encode(), False),
        itxt("long", zlib.compress(words), True),
    ]))
    found = read_png_text(path)
    assert found == {"plain": "caf\u00e9", "packed": words.decode(), "wide": "dune \u2014 yacht",
                     "long": words.decode()}


@pytest.mark.parametrize("chunk, expect", [
    (png_chunk(b"iTXt", b"crtfilter"), "damaged iTXt chunk (no end to its keyword)"),
    (png_chunk(b"iTXt", b"crtfilter\0\x01\x07\0\0x"), "unknown compression flag or method"),
    (png_chunk(b"iTXt", b"crtfilter\0\x01\0\0\0not zlib"), "text chunk 'crtfilter' is damaged"),
    (png_chunk(b"iTXt", b"crtfilter\0\x01\0\0\0" + zlib.compress(b"{}" * 100)[:-6]), "cut short"),
    (png_chunk(b"iTXt", b"crtfilter\0\0\0\0\0\xff\xfe"), "is not UTF-8 text"),
    (png_chunk(b"zTXt", b"crtfilter\0\x05abc"), "unknown compression method"),
])
def test_damaged_text_chunks_give_one_line_naming_the_file(tmp_path, chunk, expect):
    path = tmp_path / "damaged.png"
    path.write_bytes(png_with_chunks(W, H, [chunk]))
    with pytest.raises(InputError) as caught:
        read_png_text(path)
    assert str(caught.value).startswith(f"{path}: ") and expect in str(caught.value)
    result = run("inspect", path)
    assert result.exit_code == 2 and expect in one_error_line(result.stderr)


# --------------------------------------------------------------------------
# 2. The pixel limit on every frame that can be chosen


def _two_pages(first: tuple[int, int], second: tuple[int, int], second_data: bytes | None = None) -> bytes:
    (w0, h0), (w1, h1) = first, second
    page0 = {"w": w0, "h": h0, "bits": 8, "data": bytes(w0 * h0)}
    data1 = second_data if second_data is not None else bytes(64)
    return tiff([page0, {"w": w1, "h": h1, "bits": 8, "data": data1}])


def test_second_page_of_a_tiff_declaring_a_huge_size_is_refused_before_decoding(tmp_path):
    path = tmp_path / "pages.tif"
    path.write_bytes(_two_pages((8, 8), (OVER_W, OVER_H)))
    assert path.stat().st_size < 1000
    assert read_image(path).codes.shape == (8, 8, 3)  # the small first page reads
    with pytest.raises(InputError) as caught:
        read_image(path, frame=1)
    assert str(caught.value).startswith(
        f"{path}: frame 1: {OVER_W}x{OVER_H} = {OVER_W * OVER_H} pixels is over the limit of {DEFAULT_MAX_PIXELS}")


def test_the_chosen_page_is_held_to_the_limit_and_read_within_it(tmp_path):
    page1 = np.arange(40 * 30, dtype=np.uint32).astype(np.uint8).reshape(30, 40)
    path = tmp_path / "pages.tif"
    path.write_bytes(_two_pages((8, 8), (40, 30), page1.tobytes()))
    with pytest.raises(InputError, match=r"frame 1: 40x30 = 1200 pixels is over the limit of 1199"):
        read_image(path, frame=1, max_pixels=1199)
    image = read_image(path, frame=1, max_pixels=1200)
    assert np.array_equal(image.codes[..., 0], page1)
    assert read_image(path, frame=0, max_pixels=64).codes.shape == (8, 8, 3)


def test_render_of_a_huge_second_page_is_one_line_and_status_2(tmp_path):
    path = tmp_path / "pages.tif"
    path.write_bytes(_two_pages((8, 8), (OVER_W, OVER_H)))
    out = tmp_path / "o.png"
    result = run("render", path, "-o", out, "--scale", 2, "--frame", 1)
    assert result.exit_code == 2
    assert f"frame 1: {OVER_W}x{OVER_H} = {OVER_W * OVER_H} pixels is over the limit" in one_error_line(result.stderr)
    assert not out.exists()


def test_png_whose_ihdr_declares_a_huge_size_is_refused_by_read_png_codes(tmp_path):
    path = tmp_path / "huge.png"
    path.write_bytes(png_with_chunks(OVER_W, OVER_H, [], pixels=False))
    with pytest.raises(InputError, match=rf"{OVER_W}x{OVER_H} = {OVER_W * OVER_H} pixels is over the limit"):
        read_png_codes(path, max_pixels=DEFAULT_MAX_PIXELS)


def test_inspect_refuses_a_rendered_file_whose_ihdr_is_over_the_limit(rendered, tmp_path):
    record = read_render_record(rendered)
    record["geometry"]["output"] = [OVER_W, OVER_H]
    record["geometry"]["picture"] = [0, 0, OVER_W, OVER_H]
    path = tmp_path / "huge.png"
    path.write_bytes(png_with_chunks(OVER_W, OVER_H, [itxt(TEXT_KEY, json.dumps(record).encode(), False)],
                                     pixels=False))
    result = run("inspect", path)
    assert result.exit_code == 2
    line = one_error_line(result.stderr)
    assert line == (f"crtfilter: error: {path}: {OVER_W}x{OVER_H} = {OVER_W * OVER_H} pixels is over the limit "
                    f"of {DEFAULT_MAX_PIXELS}: inspect reads no larger picture")


def test_inspect_reads_the_recorded_input_with_the_limit_on(rendered, source):
    recorded = read_render_record(rendered)["input"]
    assert Path(recorded).samefile(source)
    source.write_bytes(png_with_chunks(OVER_W, OVER_H, [], pixels=False))  # the input, replaced
    result = run("inspect", rendered)
    assert result.exit_code == 2
    line = one_error_line(result.stderr)
    assert line.startswith(f"crtfilter: error: {recorded}: {OVER_W}x{OVER_H} = {OVER_W * OVER_H} pixels "
                           f"is over the limit of {DEFAULT_MAX_PIXELS} (the recorded input of {rendered})")


def test_input_file_larger_than_any_picture_within_the_limit_is_refused_unread(tmp_path):
    path = tmp_path / "padded.png"
    Image.new("RGB", (W, H)).save(path)
    with open(path, "ab") as fh:
        fh.truncate(100 << 20)  # sparse: 100 MiB on paper, nothing on disk
    with pytest.raises(InputError, match=r"file is 104857600 bytes, more than the \d+ allowed"):
        read_image(path, max_pixels=1000)
    assert read_image(path).codes.shape == (H, W, 3)  # within the default limit's bytes


# --------------------------------------------------------------------------
# 3. Only regular files


@pytest.fixture
def fifo(tmp_path) -> Path:
    path = tmp_path / "frame.png"
    os.mkfifo(path)
    return path


@pytest.fixture
def unix_socket():
    folder = Path(tempfile.mkdtemp(prefix="crtf-", dir="/tmp"))  # a socket path must be short
    path = folder / "frame.png"
    sock = socket.socket(socket.AF_UNIX)
    sock.bind(str(path))
    yield path
    sock.close()
    path.unlink()
    folder.rmdir()


def test_fifo_socket_and_folder_are_refused_by_read_image(fifo, unix_socket, tmp_path, no_blocking):
    for path, kind in ((fifo, "a FIFO"), (unix_socket, "a socket")):
        with pytest.raises(InputError) as caught:
            read_image(path)
        assert str(caught.value) == f"{path}: is not a regular file ({kind})"
    with pytest.raises(InputError, match=r"is a folder, not an image"):
        read_image(tmp_path)


def test_fifo_put_in_place_after_the_first_look_is_refused_through_the_open_file(fifo, tmp_path, monkeypatch,
                                                                                   no_blocking):
    regular = tmp_path / "regular.png"
    Image.new("RGB", (W, H)).save(regular)
    real_stat = os.stat

    def first_look(path, *args, **kwargs):  # the FIFO looked like a regular file at first
        return real_stat(regular if Path(path) == fifo else path, *args, **kwargs)

    monkeypatch.setattr(os, "stat", first_look)
    with pytest.raises(InputError) as caught:
        read_image(fifo)
    assert str(caught.value) == f"{fifo}: is not a regular file (a FIFO)"


def test_peek_image_gives_none_for_a_fifo_without_blocking(fifo, no_blocking):
    started = time.perf_counter()
    assert peek_image(fifo) is None
    # common practice, no source: looking at a path takes microseconds; a second means it
    # waited (peek_image swallows the alarm's error, so the time is what shows it)
    assert time.perf_counter() - started < 1.0


def test_other_readers_refuse_a_fifo(fifo, no_blocking):
    for reader in (read_png_text, read_png_codes, read_render_record):
        with pytest.raises(InputError) as caught:
            reader(fifo)
        assert str(caught.value) == f"{fifo}: is not a regular file (a FIFO)"


def test_every_reader_refuses_dev_zero_at_once(tmp_path):
    (tmp_path / "zero.toml").symlink_to("/dev/zero")
    (tmp_path / "look.toml").write_text('extends = "zero.toml"\ndescription = "ours"\n')
    found = child(f"""
from crtfilter.files import peek_image, read_image, read_png_codes, read_png_text, read_render_record
from crtfilter.presets import load_preset
calls = [("read_image", lambda: read_image("/dev/zero")), ("read_png_text", lambda: read_png_text("/dev/zero")),
         ("read_png_codes", lambda: read_png_codes("/dev/zero")),
         ("read_render_record", lambda: read_render_record("/dev/zero")),
         ("peek_image", lambda: peek_image("/dev/zero")),
         ("extends", lambda: load_preset({str(tmp_path / "look.toml")!r}))]
for name, call in calls:
    try:
        print(name, "gave", call())
    except Exception as exc:
        print(name, type(exc).__name__, exc)
""")
    refusal = "InputError /dev/zero: is not a regular file (a character device)"
    assert found == [f"read_image {refusal}", f"read_png_text {refusal}", f"read_png_codes {refusal}",
                     f"read_render_record {refusal}", "peek_image gave None",
                     f"extends InputError {tmp_path / 'zero.toml'}: is not a regular file (a character device)"]


@pytest.mark.parametrize("where", ["fifo", "/dev/zero"])
def test_render_of_a_fifo_or_a_device_is_one_line_and_does_not_block(fifo, tmp_path, where):
    src = fifo if where == "fifo" else Path(where)
    result = cli("render", src, "-o", tmp_path / "o.png", "--scale", 2)
    assert result.returncode == 2, result.stderr
    kind = "a FIFO" if where == "fifo" else "a character device"
    assert f"{src}: is not a regular file ({kind})" in one_error_line(result.stderr)


def test_inspect_of_a_fifo_is_one_line_and_does_not_block(fifo):
    result = cli("inspect", fifo)
    assert result.returncode == 2
    assert one_error_line(result.stderr) == f"crtfilter: error: {fifo}: is not a regular file (a FIFO)"


def test_preset_that_is_a_fifo_or_a_device_is_refused(tmp_path, no_blocking):
    look = tmp_path / "look.toml"
    os.mkfifo(look)
    with pytest.raises(InputError, match=r"look\.toml: is not a regular file \(a FIFO\)"):
        load_preset(str(look))
    with pytest.raises(InputError, match=r"^/dev/zero: is not a regular file \(a character device\)$"):
        load_preset("/dev/zero")
    with pytest.raises(InputError, match=r"is a folder, not a preset file"):
        load_preset(str(tmp_path) + os.sep)


@pytest.mark.parametrize("base, kind", [("fifo", "a FIFO"), ("/dev/zero", "a character device")])
def test_preset_extending_a_fifo_or_a_device_is_refused(tmp_path, no_blocking, base, kind):
    if base == "fifo":
        os.mkfifo(tmp_path / "base.toml")
        name = "base.toml"
    else:
        name = base
    look = tmp_path / "look.toml"
    look.write_text(f'extends = "{name}"\ndescription = "ours"\n')
    with pytest.raises(InputError, match=rf": is not a regular file \({kind}\)$"):
        load_preset(str(look))


def test_command_with_a_fifo_preset_is_one_line_and_does_not_block(tmp_path, source):
    look = tmp_path / "look.toml"
    os.mkfifo(look)
    result = cli("presets", "show", look)
    assert result.returncode == 2
    assert one_error_line(result.stderr) == f"crtfilter: error: {look}: is not a regular file (a FIFO)"
    result = cli("render", source, "-o", tmp_path / "o.png", "--preset", look)
    assert result.returncode == 2
    assert one_error_line(result.stderr) == f"crtfilter: error: {look}: is not a regular file (a FIFO)"


def test_preset_over_the_size_cap_is_refused(tmp_path):
    look = tmp_path / "look.toml"
    look.write_bytes(b'description = "big"\n' + b"# salt\n" * (MAX_PRESET_BYTES // 7 + 1))
    with pytest.raises(InputError, match=rf"preset file is \d+ bytes, more than the {MAX_PRESET_BYTES} allowed"):
        load_preset(str(look))


def test_pyproject_that_is_a_fifo_is_refused_without_blocking(tmp_path, no_blocking):
    os.mkfifo(tmp_path / "pyproject.toml")
    with pytest.raises(InputError, match=r"pyproject\.toml: is not a regular file \(a FIFO\)"):
        config_from_pyproject(tmp_path)
    result = cli("check", cwd=tmp_path)
    assert result.returncode == 2
    assert one_error_line(result.stderr).endswith("pyproject.toml: is not a regular file (a FIFO)")


# --------------------------------------------------------------------------
# 4. One line where a traceback was


def _with_record(rendered: Path, folder: Path, text: str) -> Path:
    """The rendered picture again, with ``text`` as its crtfilter record."""
    path = folder / "edited.png"
    path.write_bytes(encode_png(read_png_codes(rendered), {TEXT_KEY: text}))
    return path


def _edit(record: dict, key: str, value) -> dict:
    record = json.loads(json.dumps(record))
    *parents, last = key.split(".")
    target = record
    for part in parents:
        target = target[part]
    if value is KeyError:
        del target[last]
    else:
        target[last] = value
    return record


@pytest.mark.parametrize("change, expect", [
    ("{not json", "record is not JSON (Expecting property name"),
    ("[1, 2, 3]", "record is not a JSON object (got an array)"),
    ('"a frame"', "record is not a JSON object (got a string)"),
    ("[" * 100000 + "]" * 100000, "record is nested too deeply to read"),
    (("geometry", KeyError), "record has no geometry"),
    (("geometry.output", KeyError), "record has no geometry.output"),
    (("geometry.output", "32x24"), 'geometry.output must be two whole numbers of at least 1 (got "32x24")'),
    (("geometry.output", [32, 24.5]), "geometry.output must be two whole numbers"),
    (("geometry.picture", [0, 0, 64, 24]), "geometry.picture 64x24 at (0, 0) does not fit in the 32x24 output"),
    (("geometry.source", [0, 12]), "geometry.source must be two whole numbers of at least 1"),
    (("settings", [1]), "settings must be an object of tables"),
    (("settings.mask", 3), "settings must be an object of tables"),
    (("settings.mask.triad_pitch", "wide"), "recorded settings: [mask] triad_pitch must be a number"),
    (("settings.mask.thickness", 2), "recorded settings: [mask] unknown key 'thickness'"),
    (("mask_mean", [0.2, "x", 0.2]), "mask_mean must be three numbers"),
    (("curves", ["one"]), "curves must be three lines of text"),
    (("luminance.output", "bright"), "luminance.output must be a number or null"),
    (("luminance", KeyError), "record has no luminance.output"),
    (("local.window", [0, 3]), "local.window must be two whole numbers of at least 1"),
    (("local.p99", [1]), "local.p99 must be a number or null"),
    (("version", 1), "version must be text (got 1)"),
    (("input", 5), "input must be text (got 5)"),
    (("frame", -1), "frame must be a whole number or null (got -1)"),
    (("balance", json.loads("[" * 40 + "]" * 40)), "record nests more than 32 levels deep"),
])
def test_malformed_record_is_one_line_and_status_2(rendered, tmp_path, change, expect):
    if isinstance(change, str):
        text = change
    else:
        text = json.dumps(_edit(read_render_record(rendered), *change))
    path = _with_record(rendered, tmp_path, text)
    for args in (("inspect", path), ("inspect", path, "--json")):
        result = run(*args)
        assert result.exit_code == 2, result.stdout + result.stderr
        line = one_error_line(result.stderr)
        assert line.startswith(f"crtfilter: error: {path}: ") and expect in line, line


def test_record_as_written_still_inspects_and_holds(rendered, tmp_path):
    path = _with_record(rendered, tmp_path, json.dumps(read_render_record(rendered)))
    result = run("inspect", path)
    assert result.exit_code == 0, result.stderr
    assert "DOES NOT HOLD" not in result.stdout


@pytest.mark.parametrize("text, expect", [
    ('tool = "x"\n', "tool must be a table ([tool])"),
    ("[tool]\ncrtfilter = 3\n", "tool.crtfilter must be a table ([tool.crtfilter])"),
    ("[tool.crtfilter]\ncheck = [1, 2]\n", "tool.crtfilter.check must be a table"),
    ("[tool.crtfilter.chek]\nmin_ratio = 0.9\n", "[tool.crtfilter] unknown key 'chek'; did you mean 'check'?"),
    ("[tool.crtfilter.check]\npresets = {a = 1}\n", "presets must be a list of names (got {'a': 1})"),
    ("[tool.crtfilter.check]\npresets = [1]\n", "presets must be a list of names"),
    ("[tool.crtfilter.check]\nimages = 3\n", "images must be text in quotes (got 3)"),
    ("[tool.crtfilter.check]\nmin_ratio = \"high\"\n", "min_ratio must be a number between 0 and 10 (got 'high')"),
    ("[tool.crtfilter.check]\nmax_ratio = true\n", "max_ratio must be a number between 0 and 10 (got True)"),
    ("[tool.crtfilter.check]\nmin_contrast = 99\n", "min_contrast must be a number between 0 and 10 (got 99)"),
    ("[tool.crtfilter.check]\nmin_ratio = nan\n", "min_ratio must be a number between 0 and 10 (got nan)"),
    ("[tool.crtfilter.check]\nmin_ratio = 1.2\nmax_ratio = 1.1\n", "min_ratio 1.2 is above max_ratio 1.1"),
    ("[tool.crtfilter.check\n", "TOML syntax error"),
    (b'[tool.crtfilter.check]\nimages = "\xff"\n', "not UTF-8 text (invalid start byte at byte 33)"),
    ("x = " + "[" * 10000 + "]" * 10000 + "\n", "arrays or tables nested too deeply to read"),
])
def test_broken_pyproject_is_one_line_naming_the_file(tmp_path, monkeypatch, text, expect):
    path = tmp_path / "pyproject.toml"
    path.write_bytes(text if isinstance(text, bytes) else text.encode())
    with pytest.raises(CrtfilterError) as caught:
        config_from_pyproject(tmp_path)
    message = str(caught.value)
    assert message.startswith(f"{path}: ") and expect in message and "\n" not in message, message
    monkeypatch.chdir(tmp_path)
    result = run("check")
    assert result.exit_code == 2
    assert expect in one_error_line(result.stderr)


def test_pyproject_with_good_tables_still_reads(tmp_path):
    (tmp_path / "pyproject.toml").write_text('[project]\nname = "stills"\n[tool.other]\nx = 1\n'
                                             '[tool.crtfilter.check]\nmin_ratio = 0.995\nimages = "shots"\n')
    assert config_from_pyproject(tmp_path) == {"min_ratio": 0.995, "images": str(tmp_path / "shots")}


@pytest.mark.parametrize("nesting", ["arrays", "inline tables"])
def test_deeply_nested_preset_is_one_line(tmp_path, nesting):
    depth = 10000
    value = "[" * depth + "]" * depth if nesting == "arrays" else "{a = " * depth + "1" + "}" * depth
    look = tmp_path / "deep.toml"
    look.write_text(f'description = "deep"\n[mask]\nphosphor = {value}\n')
    with pytest.raises(SettingsError, match=r"deep\.toml: arrays or tables nested too deeply to read$"):
        load_preset(str(look))
    result = run("presets", "show", look)
    assert result.exit_code == 2
    assert one_error_line(result.stderr) == f"crtfilter: error: {look}: arrays or tables nested too deeply to read"


def test_preset_that_is_not_utf8_is_one_line(tmp_path):
    look = tmp_path / "look.toml"
    look.write_bytes(b'description = "caf\xe9"\n')
    with pytest.raises(SettingsError, match=r"look\.toml: not UTF-8 text"):
        load_preset(str(look))


# --------------------------------------------------------------------------
# 5. Float and 32-bit integer samples, by their declared range


def _srgb_linear(code: float) -> float:
    # reference library: colour-science eotf_sRGB (IEC 61966-2-1:1999)
    return float(colour_module().models.eotf_sRGB(code))


def test_float_tiff_in_0_to_1_reads_as_the_equivalent_16_bit_codes(tmp_path):
    path = float_tiff(tmp_path / "half.tif", np.full((H, W), 0.5))
    image = read_image(path)
    reference = read_image(grey16_png(tmp_path / "half.png", 32768))
    # 0.5 of 65535 is 32767.5, rounded to the nearest even code: 32768
    assert image.bits == 16 and image.codes.dtype == np.uint16
    assert np.array_equal(image.codes, reference.codes)
    assert any("taken as 0 to 1" in n for n in image.notes)
    assert peek_image(path) == (W, H, 16, False)


def test_float_ramp_maps_onto_the_nearest_16_bit_codes(tmp_path):
    ramp = np.linspace(0.0, 1.0, W * H, dtype=np.float32).reshape(H, W)
    image = read_image(float_tiff(tmp_path / "ramp.tif", ramp))
    expected = np.rint(ramp.astype(np.float64) * 65535).astype(np.uint16)
    assert np.array_equal(image.codes[..., 1], expected)
    assert image.codes[0, 0, 0] == 0 and image.codes[-1, -1, 0] == 65535


def test_float_tiff_maps_by_its_declared_range(tmp_path):
    values = np.linspace(-200.0, 800.0, W * H, dtype=np.float32).reshape(H, W)
    image = read_image(float_tiff(tmp_path / "range.tif", values, smin=-200.0, smax=800.0))
    expected = np.rint((values.astype(np.float64) + 200.0) / 1000.0 * 65535).astype(np.uint16)
    assert np.array_equal(image.codes[..., 0], expected)
    assert any("declared range -200 to 800" in n for n in image.notes)


def test_float_samples_outside_the_declared_range_are_clipped_with_a_note(tmp_path):
    values = np.full((H, W), 0.5, np.float32)
    values[0, :4] = 3.0
    image = read_image(float_tiff(tmp_path / "over.tif", values, smin=0.0, smax=2.0))
    assert image.codes[0, 0, 0] == 65535 and image.codes[1, 1, 0] == 16384  # 0.25 of 65535, rounded
    assert "4 samples outside the declared range clipped" in image.notes


@pytest.mark.parametrize("fill, smin, smax, expect", [
    (1000.0, None, None, "float samples run from 0.5 to 1000 and the file declares no range "
                         "(SMinSampleValue and SMaxSampleValue); without one only 0 to 1 is taken"),
    (-0.5, None, None, "float samples run from -0.5 to 0.5"),
    (np.nan, None, None, "1 of 192 float samples are NaN or infinite"),
    (np.inf, 0.0, 1.0, "1 of 192 float samples are NaN or infinite"),
    (0.5, 1.0, 1.0, "declared sample range (SMinSampleValue to SMaxSampleValue) 1 to 1 is empty"),
])
def test_float_tiff_without_a_usable_range_is_refused_in_one_line(tmp_path, fill, smin, smax, expect):
    values = np.full((H, W), 0.5, np.float32)
    values[0, 0] = fill
    path = float_tiff(tmp_path / "bad.tif", values, smin, smax)
    with pytest.raises(InputError) as caught:
        read_image(path)
    assert str(caught.value).startswith(f"{path}: ") and expect in str(caught.value), str(caught.value)
    result = run("render", path, "-o", tmp_path / "o.png", "--scale", 2)
    assert result.exit_code == 2 and expect in one_error_line(result.stderr)


def test_rendered_float_tiff_keeps_the_light_of_the_equal_grey(tmp_path):
    src = float_tiff(tmp_path / "half.tif", np.full((H, W), 0.5))
    ref = grey16_png(tmp_path / "half16.png", 32768)
    outs = []
    for path in (src, ref):
        out = tmp_path / f"{path.stem}-crt.png"
        result = run("render", path, "-o", out, "--scale", 2, "--report", out.with_suffix(".json"))
        assert result.exit_code == 0, result.stderr
        outs.append(out)
    float_codes, ref_codes = read_png_codes(outs[0]), read_png_codes(outs[1])
    assert np.array_equal(float_codes, ref_codes)
    expected = _srgb_linear(32768 / 65535)  # a grey's luminance is its channels' linear value
    output = float(np.mean(colour_module().models.eotf_sRGB(float_codes[..., :3] / 255.0)))
    assert output == pytest.approx(expected, rel=TOL_ENERGY_FILE)
    report = json.loads(outs[0].with_suffix(".json").read_text())[0]
    assert any("float samples" in n for n in report["notes"])


def _int_tiff(path: Path, values: np.ndarray, bits: int, signed: bool, tags=()) -> Path:
    kind = {(32, True): "<i4", (32, False): "<u4", (16, True): "<i2", (16, False): "<u2"}[bits, signed]
    path.write_bytes(tiff([{"w": values.shape[1], "h": values.shape[0], "bits": bits,
                            "sample_format": 2 if signed else 1, "data": values.astype(kind).tobytes(),
                            "tags": list(tags)}]))
    return path


@pytest.mark.parametrize("bits, signed, low, high, tags", [
    (32, True, 0, 100000, [(340, SLONG, [0]), (341, SLONG, [100000])]),
    (32, False, 0, 100000, [(340, LONG, [0]), (341, LONG, [100000])]),
    (32, True, 0, 50000, [(281, SHORT, [50000])]),  # MinSampleValue left out: 0
    (16, True, -20000, 30000, [(340, SLONG, [-20000]), (341, SLONG, [30000])]),
])
def test_integer_tiff_maps_by_its_declared_range(tmp_path, bits, signed, low, high, tags):
    values = np.linspace(low, high, W * H).round().reshape(H, W)
    image = read_image(_int_tiff(tmp_path / "int.tif", values, bits, signed, tags))
    expected = np.rint((values - low) / (high - low) * 65535).astype(np.uint16)
    assert image.bits == 16
    assert np.array_equal(image.codes[..., 2], expected)
    assert any(f"declared range {low} to {high}" in n for n in image.notes)


@pytest.mark.parametrize("bits, signed, kind", [(32, True, "signed 32-bit integer"), (32, False, "32-bit integer"),
                                                 (16, True, "signed 16-bit integer")])
def test_integer_tiff_without_a_declared_range_is_refused(tmp_path, bits, signed, kind):
    values = np.arange(W * H).reshape(H, W) * 7
    path = _int_tiff(tmp_path / "int.tif", values, bits, signed)
    with pytest.raises(InputError) as caught:
        read_image(path)
    assert str(caught.value) == (
        f"{path}: {kind} samples run from 0 to {7 * (W * H - 1)} and the file declares no range "
        f"(SMinSampleValue and SMaxSampleValue, or MaxSampleValue): cannot tell which value is white")


def test_unsigned_16_bit_tiff_is_read_at_full_precision(tmp_path):
    values = (np.arange(W * H, dtype=np.uint32) * 341 + 5).astype(np.uint16).reshape(H, W)  # low bytes vary
    Image.fromarray(values).save(tmp_path / "grey16.tif")  # Pillow writes uint16 as a 16-bit TIFF
    image = read_image(tmp_path / "grey16.tif")
    assert image.bits == 16
    assert np.array_equal(image.codes[..., 0], values)
    tagged = _int_tiff(tmp_path / "tagged.tif", values, 16, False, [(281, SHORT, [4095])])
    assert np.array_equal(read_image(tagged).codes[..., 0], values)  # MaxSampleValue is only statistics there
