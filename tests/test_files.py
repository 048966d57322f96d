"""Input files of every kind, drawn here, each with the outcome it must have; atomic writes."""

from __future__ import annotations

import hashlib
import json
import math
import os
import stat
import struct
import subprocess
import sys
import time
import zlib
from pathlib import Path

import imagecodecs
import numpy as np
import pytest
from conftest import TOL_ENERGY_FILE, TOL_TRANSFER, colour_module, run
from PIL import Image, ImageCms

from crtfilter.files import read_image, read_png_codes, remove_stale_parts, write_atomic

W, H = 16, 12  # every small corpus picture; renders use --scale 2, so outputs are 32x24
RNG_SEED = 20240611


def render_cli(src: Path, out: Path, *extra) -> tuple[object, dict | None]:
    """Render one file with the command at scale 2 and return the result and its report entry."""
    report = out.with_suffix(".json")
    result = run("render", src, "-o", out, "--scale", "2", "--report", report, *extra)
    entries = json.loads(report.read_text()) if report.is_file() else []
    return result, (entries[0] if entries else None)


def srgb_to_linear(code: float, top: int = 255) -> float:
    # reference library: colour-science eotf_sRGB (IEC 61966-2-1:1999)
    return float(colour_module().models.eotf_sRGB(code / top))


def one_error_line(result) -> str:
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("crtfilter: error:"), result.stderr
    assert "Traceback" not in result.stderr + result.stdout
    return lines[0]


def leftovers(folder: Path) -> list[str]:
    """Temporary files a write may have left: anything hidden or ending in .part."""
    return sorted(str(p) for p in folder.rglob("*") if p.name.startswith(".") or p.suffix == ".part")


# --------------------------------------------------------------------------
# The corpus, drawn with Pillow and imagecodecs


def _png_chunk(kind: bytes, body: bytes) -> bytes:
    # ISO/IEC 15948 (PNG), sec. 5.3: length, type, data, CRC-32 of type and data
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))


def _png_by_hand(w: int, h: int, bit_depth: int, with_pixels: bool) -> bytes:
    """A grey PNG of w x h; with_pixels writes all-black rows (they compress to almost nothing)."""
    # ISO/IEC 15948 (PNG), sec. 11.2.2: IHDR = width, height, bit depth, colour type 0 (grey), ...
    ihdr = struct.pack(">IIBBBBB", w, h, bit_depth, 0, 0, 0, 0)
    body = b""
    if with_pixels:
        row = bytes(1 + (w * bit_depth + 7) // 8)  # filter byte 0, then the samples
        packer = zlib.compressobj(9)
        body = _png_chunk(b"IDAT", b"".join(packer.compress(row) for _ in range(h)) + packer.flush())
    return b"\x89PNG\r\n\x1a\n" + _png_chunk(b"IHDR", ihdr) + body + _png_chunk(b"IEND", b"")


def _swapped_primaries_profile() -> bytes:
    """An RGB profile that is not sRGB: the sRGB profile with its red and blue colorants swapped."""
    data = bytearray(ImageCms.ImageCmsProfile(ImageCms.createProfile("sRGB")).tobytes())
    # ICC.1 (ICC profile format), sec. 7.3: tag count at byte 128, then 12-byte entries
    # (signature, offset, size); rXYZ and bXYZ hold the red and blue primaries
    (count,) = struct.unpack(">I", data[128:132])
    entries = {bytes(data[132 + 12 * i:136 + 12 * i]): 132 + 12 * i for i in range(count)}
    red, blue = entries[b"rXYZ"], entries[b"bXYZ"]
    data[red + 4:red + 12], data[blue + 4:blue + 12] = data[blue + 4:blue + 12], data[red + 4:red + 12]
    # the description says sRGB; rename it (same length, UTF-16BE as in its mluc tag)
    old, new = "sRGB built-in".encode("utf-16-be"), "swapped R & B".encode("utf-16-be")
    assert data.count(old) == 1
    return bytes(data).replace(old, new)


def _halves(left, right, mode="RGB", size=(W, H)) -> Image.Image:
    im = Image.new(mode, size, left)
    im.paste(Image.new(mode, (size[0] // 2, size[1]), right), (size[0] // 2, 0))
    return im


def _grey16(values: np.ndarray) -> Image.Image:
    im = Image.fromarray(values)  # Pillow makes uint16 samples mode I;16
    assert im.mode == "I;16"
    return im


@pytest.fixture(scope="module")
def corpus(tmp_path_factory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("corpus")
    rng = np.random.default_rng(RNG_SEED)
    made: dict[str, Path] = {}

    def path(name: str) -> Path:
        made[name] = root / name
        return made[name]

    noise = rng.integers(30, 226, (H, W, 3), dtype=np.uint8)
    # palette: left half index 0 (red), right half index 1 (green)
    index = np.zeros((H, W), np.uint8)
    index[:, W // 2:] = 1
    pal = Image.fromarray(index, "P")
    pal.putpalette([255, 0, 0, 0, 255, 0] + [0] * 762)
    pal.save(path("palette.png"))
    pal.save(path("palette-trns.png"), transparency=0)

    Image.fromarray(noise[..., 1], "L").save(path("grey.png"))
    Image.fromarray(np.dstack([noise[..., 1], noise[..., 2]]), "LA").save(path("grey-alpha.png"))
    Image.fromarray(noise, "RGB").save(path("rgb.png"))
    alpha = rng.integers(0, 256, (H, W), dtype=np.uint8)
    Image.fromarray(np.dstack([noise, alpha]), "RGBA").save(path("rgba.png"))
    Image.new("RGBA", (W, H), (255, 255, 255, 128)).save(path("white-half-covered.png"))
    Image.new("RGBA", (W, H), (0, 0, 0, 128)).save(path("black-half-covered.png"))
    Image.new("RGBA", (W, H), (200, 100, 50, 128)).save(path("colour-half-covered.png"))
    Image.new("RGB", (W, H), (200, 100, 50)).save(path("colour.png"))

    deep = rng.integers(0, 65536, (H, W, 3), dtype=np.uint16)
    path("rgb16.png").write_bytes(imagecodecs.png_encode(deep))
    np.save(root / "rgb16.npy", deep)
    deep_grey = rng.integers(0, 65536, (H, W), dtype=np.uint16)
    _grey16(deep_grey).save(path("grey16.png"))
    np.save(root / "grey16.npy", deep_grey)
    _grey16(np.full((H, W), 0x8000, np.uint16)).save(path("grey16-8000.png"))
    _grey16(np.full((H, W), 0x80FF, np.uint16)).save(path("grey16-80ff.png"))

    Image.fromarray(noise, "RGB").save(path("photo.jpg"), quality=90)
    Image.new("CMYK", (W, H), (0, 255, 255, 0)).save(path("cmyk.jpg"))
    # stored 40x20, left half red and right half green, to be shown turned a quarter clockwise
    exif = Image.Exif()
    exif[0x0112] = 6  # EXIF 2.32 (CIPA DC-008), Orientation: 6 = turn 90 degrees clockwise to view
    _halves((255, 0, 0), (0, 255, 0), size=(40, 20)).save(path("turned.jpg"), exif=exif, quality=95)
    Image.fromarray(noise, "RGB").save(path("picture.bmp"))
    Image.fromarray(noise, "RGB").convert("P").save(path("picture.gif"))
    Image.fromarray(noise, "RGB").save(path("picture.tif"))
    Image.fromarray(noise, "RGB").save(path("picture.webp"), lossless=True)

    red = Image.new("RGB", (W, H), (200, 0, 0))
    def built_in(kind: str) -> bytes:
        return ImageCms.ImageCmsProfile(ImageCms.createProfile(kind)).tobytes()

    red.save(path("profile-srgb.png"), icc_profile=built_in("sRGB"))
    red.save(path("profile-swapped.png"), icc_profile=_swapped_primaries_profile())
    red.save(path("profile-lab.png"), icc_profile=built_in("LAB"))
    red.save(path("profile-junk.png"), icc_profile=rng.integers(0, 256, 300, dtype=np.uint8).tobytes())

    # pure primaries, so each frame's luminance is one BT.709 coefficient
    frames = [Image.new("RGB", (W, H), c) for c in [(255, 0, 0), (0, 255, 0), (0, 0, 255)]]
    frames[0].save(path("animated.gif"), save_all=True, append_images=frames[1:], duration=100, loop=0)
    frames[0].save(path("animated.png"), save_all=True, append_images=frames[1:], duration=100, loop=0)

    path("bomb.png").write_bytes(_png_by_hand(20000, 20000, 1, with_pixels=True))
    path("bomb16.png").write_bytes(_png_by_hand(20000, 20000, 16, with_pixels=False))
    Image.new("L", (3000, 3000), 128).save(path("large.png"))

    path("empty.png").write_bytes(b"")
    whole = (root / "rgb.png").read_bytes()
    path("truncated.png").write_bytes(whole[:len(whole) // 2])
    whole = (root / "rgb16.png").read_bytes()
    path("truncated16.png").write_bytes(whole[:len(whole) // 2])
    whole = (root / "photo.jpg").read_bytes()
    path("truncated.jpg").write_bytes(whole[:len(whole) // 2])
    path("text.png").write_text("this is a note, not a picture\n")
    path("text.jpg").write_bytes(b"GIF89a? no: " + bytes(range(256)))
    return made


@pytest.fixture(autouse=True)
def inputs_never_change(request):
    """Every test leaves the corpus byte for byte as it was."""
    if "corpus" not in request.fixturenames:
        yield
        return
    files = request.getfixturevalue("corpus")
    before = {n: hashlib.sha256(p.read_bytes()).hexdigest() for n, p in files.items()}
    yield
    after = {n: hashlib.sha256(p.read_bytes()).hexdigest() for n, p in files.items()}
    assert after == before


# --------------------------------------------------------------------------
# Files that render


@pytest.mark.parametrize("name, size, note", [
    ("palette.png", (W, H), "palette expanded"),
    ("palette-trns.png", (W, H), "palette expanded with its transparency"),
    ("grey.png", (W, H), "grey expanded to RGB"),
    ("grey-alpha.png", (W, H), "grey expanded to RGB"),
    ("rgb.png", (W, H), None),
    ("rgba.png", (W, H), None),
    ("rgb16.png", (W, H), "16-bit samples kept"),
    ("grey16.png", (W, H), "16-bit samples kept"),
    ("photo.jpg", (W, H), None),
    ("cmyk.jpg", (W, H), "converted from CMYK to RGB"),
    ("turned.jpg", (20, 40), "turned upright (EXIF orientation 6)"),
    ("picture.bmp", (W, H), None),
    ("picture.gif", (W, H), "palette expanded"),
    ("picture.tif", (W, H), None),
    ("picture.webp", (W, H), None),
])
def test_each_kind_of_file_renders_with_its_note(corpus, tmp_path, name, size, note):
    out = tmp_path / "out.png"
    result, report = render_cli(corpus[name], out)
    assert result.exit_code == 0, result.stderr
    codes = read_png_codes(out)
    assert codes.shape == (2 * size[1], 2 * size[0], 3)
    assert report["geometry"]["source"] == list(size)
    if note is not None:
        assert note in report["notes"]
    assert math.isfinite(report["luminance"]["ratio"])
    assert abs(report["luminance"]["ratio"] - 1) < TOL_ENERGY_FILE
    assert not leftovers(tmp_path)


def test_palette_transparency_comes_out_black_over_the_default_backdrop(corpus, tmp_path):
    result, _ = render_cli(corpus["palette-trns.png"], tmp_path / "t.png")
    assert result.exit_code == 0, result.stderr
    out = read_png_codes(tmp_path / "t.png")
    assert out.shape[2] == 3
    # transparent left half (source columns 0-7, output columns 0-15), over black
    assert not out[:, :2 * (W // 2)].any()
    assert out[:, 2 * (W // 2):, 1].max() > 200  # the opaque green half is still there
    plain, _ = render_cli(corpus["palette.png"], tmp_path / "p.png")
    assert plain.exit_code == 0, plain.stderr
    assert read_png_codes(tmp_path / "p.png")[:, :2 * (W // 2), 0].max() > 200  # red without tRNS


def test_half_covered_white_over_black_mixes_in_linear_light(corpus, tmp_path):
    result, report = render_cli(corpus["white-half-covered.png"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    lum = report["luminance"]["input"]
    # common practice, no source: "over" mixes colour and backdrop by coverage, in linear light
    assert lum == pytest.approx(128 / 255, abs=TOL_TRANSFER)
    # IEC 61966-2-1: that is the light of sRGB grey 188 (0.503), not of grey 128 (0.216)
    assert srgb_to_linear(187) < lum < srgb_to_linear(189)


def test_half_covered_black_over_white_mixes_in_linear_light(corpus, tmp_path):
    result, report = render_cli(corpus["black-half-covered.png"], tmp_path / "o.png", "--alpha", "over:white")
    assert result.exit_code == 0, result.stderr
    # common practice, no source: "over" in linear light; white is 1.0 (IEC 61966-2-1)
    assert report["luminance"]["input"] == pytest.approx(1 - 128 / 255, abs=TOL_TRANSFER)
    assert report["settings"]["source"]["alpha"] == "over:white"
    default, report_black = render_cli(corpus["black-half-covered.png"], tmp_path / "b.png")
    assert default.exit_code == 0
    assert report_black["luminance"]["ratio"] is None  # black over black: no light to hold


def test_alpha_keep_writes_rgba_with_the_input_alpha_upscaled(corpus, tmp_path):
    result, _ = render_cli(corpus["rgba.png"], tmp_path / "k.png", "--alpha", "keep")
    assert result.exit_code == 0, result.stderr
    out = read_png_codes(tmp_path / "k.png")
    assert out.shape == (2 * H, 2 * W, 4)
    with Image.open(corpus["rgba.png"]) as im:
        alpha = np.asarray(im)[..., 3]
    # common practice, no source: at a whole scale each source pixel covers a 2x2 block
    assert np.array_equal(out[..., 3], np.repeat(np.repeat(alpha, 2, axis=0), 2, axis=1))


def test_alpha_keep_leaves_the_colour_as_if_opaque(corpus, tmp_path):
    kept, _ = render_cli(corpus["colour-half-covered.png"], tmp_path / "k.png", "--alpha", "keep")
    opaque, _ = render_cli(corpus["colour.png"], tmp_path / "o.png")
    assert kept.exit_code == 0 and opaque.exit_code == 0
    out = read_png_codes(tmp_path / "k.png")
    assert out.shape[2] == 4
    assert (out[..., 3] == 128).all()
    assert np.array_equal(out[..., :3], read_png_codes(tmp_path / "o.png"))


def test_alpha_keep_leaves_the_borders_transparent(corpus, tmp_path):
    out = tmp_path / "k.png"
    result = run("render", corpus["colour-half-covered.png"], "-o", out, "--size", "64x40", "--alpha", "keep",
                 "--report", tmp_path / "r.json")
    assert result.exit_code == 0, result.stderr
    x, y, w, h = json.loads((tmp_path / "r.json").read_text())[0]["geometry"]["picture"]
    assert (w, h) != (64, 40)  # there are borders to look at
    alpha = read_png_codes(out)[..., 3]
    inside = np.zeros(alpha.shape, bool)
    inside[y:y + h, x:x + w] = True
    assert (alpha[inside] == 128).all()
    assert not alpha[~inside].any()


def test_16bit_rgb_is_read_at_full_precision(corpus):
    image = read_image(corpus["rgb16.png"])
    assert image.codes.dtype == np.uint16 and image.bits == 16
    assert np.array_equal(image.codes, np.load(corpus["rgb16.png"].with_suffix(".npy")))


def test_16bit_grey_is_read_at_full_precision(corpus):
    image = read_image(corpus["grey16.png"])
    assert image.codes.dtype == np.uint16
    written = np.load(corpus["grey16.png"].with_suffix(".npy"))
    for c in range(3):
        assert np.array_equal(image.codes[..., c], written)


def test_16bit_low_byte_reaches_the_source_luminance(corpus, tmp_path):
    lo, rep_lo = render_cli(corpus["grey16-8000.png"], tmp_path / "a.png")
    hi, rep_hi = render_cli(corpus["grey16-80ff.png"], tmp_path / "b.png")
    assert lo.exit_code == 0 and hi.exit_code == 0
    # a grey's luminance is its linear value: the BT.709 coefficients sum to 1 (ITU-R BT.709-6)
    assert rep_lo["luminance"]["input"] == pytest.approx(srgb_to_linear(0x8000, 65535), abs=TOL_TRANSFER)
    assert rep_hi["luminance"]["input"] == pytest.approx(srgb_to_linear(0x80FF, 65535), abs=TOL_TRANSFER)
    assert rep_hi["luminance"]["input"] > rep_lo["luminance"]["input"]


def test_exif_orientation_turns_the_picture_upright(corpus, tmp_path):
    image = read_image(corpus["turned.jpg"])
    assert image.codes.shape == (40, 20, 3)
    top, bottom = image.codes[:15].astype(int), image.codes[25:].astype(int)
    # EXIF 2.32 (CIPA DC-008): orientation 6 shows the stored left edge at the top
    assert (top[..., 0] > top[..., 1] + 100).all() and (bottom[..., 1] > bottom[..., 0] + 100).all()
    result, report = render_cli(corpus["turned.jpg"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    assert read_png_codes(tmp_path / "o.png").shape == (80, 40, 3)
    assert report["geometry"]["output"] == [40, 80]


def test_srgb_profile_is_named_in_the_report(corpus, tmp_path):
    result, report = render_cli(corpus["profile-srgb.png"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    assert report["input_profile"].lower().startswith("srgb")
    assert not [n for n in report["notes"] if "profile" in n]


def test_other_rgb_profile_is_converted_to_srgb(corpus, tmp_path):
    image = read_image(corpus["profile-swapped.png"])
    # ICC.1: with the red and blue colorants swapped, code (200, 0, 0) is a blue
    r, _, b = image.codes[0, 0].astype(int)
    assert b > 150 and r < 50
    result, report = render_cli(corpus["profile-swapped.png"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    assert report["input_profile"] == "swapped R & B"
    assert "converted from colour profile 'swapped R & B' to sRGB" in report["notes"]


def test_profile_that_cannot_apply_to_rgb_gives_a_note(corpus, tmp_path):
    result, report = render_cli(corpus["profile-lab.png"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    assert any("could not be applied" in n for n in report["notes"])


def test_unreadable_profile_gives_a_warning_note(corpus, tmp_path):
    result, report = render_cli(corpus["profile-junk.png"], tmp_path / "o.png")
    assert result.exit_code == 0, result.stderr
    assert report["input_profile"] == "unreadable"
    assert any("unreadable" in n for n in report["notes"])


@pytest.mark.parametrize("name", ["animated.gif", "animated.png"])
def test_animated_file_takes_the_frame_asked_for_or_is_a_clip(corpus, tmp_path, name):
    first, rep0 = render_cli(corpus[name], tmp_path / "f0.png", "--frame", "0")
    third, rep2 = render_cli(corpus[name], tmp_path / "f2.png", "--frame", "2")
    whole, clip = render_cli(corpus[name], tmp_path / "all.png")
    assert first.exit_code == 0 and third.exit_code == 0 and whole.exit_code == 0, first.stderr + third.stderr
    with Image.open(tmp_path / "all.png") as im:  # an APNG of every frame, as Pillow reads it
        assert im.n_frames == clip["clip"]["frames"] >= 3
    assert "animated: frame 0 of 3 taken" in rep0["notes"]
    assert "animated: frame 2 of 3 taken" in rep2["notes"]
    # ITU-R BT.709-6: luminance of the red primary 0.2126, of the blue primary 0.0722
    assert rep0["luminance"]["input"] == pytest.approx(0.2126, abs=TOL_TRANSFER)
    assert rep2["luminance"]["input"] == pytest.approx(0.0722, abs=TOL_TRANSFER)


# --------------------------------------------------------------------------
# Files that fail: one line, status 2, nothing written


@pytest.mark.parametrize("name, extra, expect", [
    ("empty.png", (), "file is empty"),
    ("truncated.png", (), "damaged or truncated"),
    ("truncated16.png", (), "damaged or truncated"),
    ("truncated.jpg", (), "damaged or truncated"),
    ("text.png", (), "not an image"),
    ("text.jpg", (), "not an image"),
    ("animated.gif", ("--frame", "99"), "frame must be 0 to 2 (got 99)"),
    ("animated.png", ("--frame", "99"), "frame must be 0 to 2 (got 99)"),
    ("rgb.png", ("--frame", "1"), "has 1 frame"),
    ("large.png", ("--max-pixels", "1000000"), "3000x3000 = 9000000 pixels is over the limit of 1000000"),
])
def test_bad_file_gives_one_error_line_and_no_output(corpus, tmp_path, name, extra, expect):
    out = tmp_path / "o.png"
    result = run("render", corpus[name], "-o", out, "--scale", "2", *extra)
    assert result.exit_code == 2
    line = one_error_line(result)
    assert expect in line and name in line
    assert not out.exists()
    assert not leftovers(tmp_path)


@pytest.mark.parametrize("name, size", [("bomb.png", "20000x20000"), ("bomb16.png", "20000x20000")])
def test_decompression_bomb_is_refused_before_decoding(corpus, tmp_path, name, size):
    out = tmp_path / "o.png"
    started = time.perf_counter()
    result = run("render", corpus[name], "-o", out, "--scale", "2")
    took = time.perf_counter() - started
    assert result.exit_code == 2
    line = one_error_line(result)
    assert f"{size} = 400000000 pixels is over the limit of 89478485" in line
    assert "--max-pixels" in line
    # common practice, no source: decoding 400 million pixels takes far more than 5 s (and
    # over a gigabyte), while reading a header takes milliseconds: so the size was checked first
    assert took < 5.0
    assert not out.exists()


def test_max_pixels_raised_lets_a_large_file_through(corpus, tmp_path):
    out = tmp_path / "o.png"
    result = run("render", corpus["large.png"], "-o", out, "--size", "64x64", "--max-pixels", "10000000")
    assert result.exit_code == 0, result.stderr
    assert read_png_codes(out).shape == (64, 64, 3)


@pytest.mark.skipif(os.geteuid() == 0, reason="root can read a file without read permission")
def test_file_without_read_permission_gives_one_error_line(tmp_path):
    src = tmp_path / "locked.png"
    Image.new("RGB", (W, H), (10, 20, 30)).save(src)
    src.chmod(0)
    try:
        result = run("render", src, "-o", tmp_path / "o.png", "--scale", "2")
    finally:
        src.chmod(0o644)
    assert result.exit_code == 2
    assert "permission denied" in one_error_line(result)
    assert not (tmp_path / "o.png").exists()


def test_file_the_system_refuses_to_open_gives_one_error_line(corpus, tmp_path, monkeypatch):
    # what a file without read permission does for a user who is not root, even when run as root
    import builtins

    import crtfilter.files

    refused = corpus["rgb.png"]

    def guarded_open(file, *args, **kwargs):
        if Path(file) == refused:
            raise PermissionError(13, "Permission denied", str(file))
        return builtins.open(file, *args, **kwargs)

    monkeypatch.setattr(crtfilter.files, "open", guarded_open, raising=False)
    out = tmp_path / "o.png"
    result = run("render", refused, "-o", out, "--scale", "2")
    assert result.exit_code == 2
    assert one_error_line(result) == f"crtfilter: error: {refused}: permission denied"
    assert not out.exists()


def test_folder_of_mixed_files_renders_the_good_and_names_the_bad(corpus, tmp_path):
    folder = tmp_path / "mixed"
    folder.mkdir()
    for name in ("rgb.png", "photo.jpg", "picture.gif"):
        (folder / name).write_bytes(corpus[name].read_bytes())
    (folder / "broken.png").write_bytes(corpus["truncated.png"].read_bytes())
    (folder / "notes.txt").write_text("level 1: forest\n")
    (folder / "palette.act").write_bytes(bytes(768))
    out = tmp_path / "out"
    result = run("render", folder, "-o", out, "--scale", "2")
    assert result.exit_code == 1
    assert "3 rendered, 1 failed, 2 skipped (not images by their ending)" in result.stdout
    failed = [ln for ln in result.stderr.splitlines() if ln.startswith("  failed:")]
    assert len(failed) == 1 and "broken.png" in failed[0] and "damaged or truncated" in failed[0]
    assert sorted(p.name for p in out.iterdir()) == ["photo.png", "picture.png", "rgb.png"]
    for p in out.iterdir():
        assert read_png_codes(p).shape == (2 * H, 2 * W, 3)


# --------------------------------------------------------------------------
# Atomic writes


@pytest.fixture
def umask_022():
    old = os.umask(0o022)
    yield
    os.umask(old)


@pytest.fixture(params=["unnamed", "named"])
def write_path(request, monkeypatch):
    """Run write_atomic through its O_TMPFILE path, and through its named .part fallback."""
    if request.param == "named":
        monkeypatch.delattr(os, "O_TMPFILE", raising=False)
    return request.param


def test_write_atomic_writes_the_bytes_with_normal_permissions(tmp_path, umask_022, write_path):
    target = tmp_path / "x.png"
    write_atomic(target, b"first")
    assert target.read_bytes() == b"first"
    # common practice, no source: a new file gets 0666 less the umask, here 0644 (not 0600)
    assert stat.S_IMODE(target.stat().st_mode) == 0o644
    write_atomic(target, b"second, longer")
    assert target.read_bytes() == b"second, longer"
    assert stat.S_IMODE(target.stat().st_mode) == 0o644
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.png"]


def test_write_atomic_failing_at_the_rename_leaves_the_old_file_and_no_part(tmp_path, monkeypatch,
                                                                           write_path):
    target = tmp_path / "x.png"
    target.write_bytes(b"old")

    def refuse(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", refuse)
    with pytest.raises(OSError, match="No space left"):
        write_atomic(target, b"new")
    assert target.read_bytes() == b"old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.png"]


def test_write_atomic_failing_mid_write_leaves_no_part(tmp_path, monkeypatch, write_path):
    def refuse(fd):
        raise OSError(5, "Input/output error")

    # (the unnamed path falls back to the named one on an OSError, which then fails the same way)
    monkeypatch.setattr(os, "fsync", refuse)
    with pytest.raises(OSError, match="Input/output error"):
        write_atomic(tmp_path / "x.png", b"new")
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_write_atomic_interrupted_after_naming_leaves_no_part(tmp_path, monkeypatch):
    real_link = os.link

    def link_then_interrupt(*args, **kwargs):
        real_link(*args, **kwargs)
        raise KeyboardInterrupt("ctrl-c")  # as if Ctrl-C arrived as the link returned

    monkeypatch.setattr(os, "link", link_then_interrupt)
    with pytest.raises(KeyboardInterrupt, match="ctrl-c"):
        write_atomic(tmp_path / "x.png", b"new")
    assert leftovers(tmp_path) == []


def _reaped_pid() -> int:
    """The pid of a child that has ended and been waited for: it names no process now."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_remove_stale_parts_removes_only_those_of_dead_runs_in_that_folder(tmp_path):
    dead = _reaped_pid()
    (tmp_path / "sub").mkdir()
    stale = tmp_path / f".x.png.crtfilter-{dead}-abcd0123.part"
    stale_below = tmp_path / "sub" / f".y.png.crtfilter-{dead}-abcd0123.part"   # another folder: not swept
    alive = tmp_path / f".z.png.crtfilter-{os.getpid()}-abcd0123.part"
    other = tmp_path / ".notes.part"
    near = tmp_path / f".w.png.crtfilter-{dead}-notours.part"                  # not a name write_atomic makes
    for p in (stale, stale_below, alive, other, near):
        p.write_bytes(b"half")
    removed = remove_stale_parts(tmp_path)
    assert removed == [stale]
    assert not stale.exists()
    assert stale_below.exists() and alive.exists() and other.exists() and near.exists()


def test_remove_stale_parts_can_be_held_to_the_names_of_planned_outputs(tmp_path):
    dead = _reaped_pid()
    planned = tmp_path / f".a.png.crtfilter-{dead}-00ff00ff.part"
    unplanned = tmp_path / f".b.png.crtfilter-{dead}-00ff00ff.part"
    for p in (planned, unplanned):
        p.write_bytes(b"half")
    assert remove_stale_parts(tmp_path, {"a.png"}) == [planned]
    assert unplanned.exists()


def test_compression_9_keeps_the_smaller_of_filtered_and_unfiltered_rows():
    import imagecodecs

    from crtfilter.files import encode_png

    rng = np.random.default_rng(3)
    sharp = np.repeat(np.repeat(rng.integers(0, 255, (24, 32, 3), dtype=np.uint8), 9, 0), 9, 1)
    smooth = np.broadcast_to(np.linspace(0, 255, 288).astype(np.uint8)[None, :, None], (216, 288, 3)).copy()
    for codes in (sharp, smooth):
        best = encode_png(codes, level=9)
        assert len(best) <= len(encode_png(codes, level=6))
        assert len(best) <= len(imagecodecs.png_encode(codes, level=9, filter=248)) + 64
        assert np.array_equal(imagecodecs.png_decode(best), codes)  # lossless either way
