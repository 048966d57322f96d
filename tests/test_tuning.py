"""What testers tune from the command line without a preset file: overrides of the knobs
tuned most, size with scale, fill or whole scale, captures (line-doubled, cropped,
overscan), the warnings when a render cannot show what it is for, and preset names that
promise no more than they give."""

from __future__ import annotations

import json
import re
import warnings

import numpy as np
import pytest
from PIL import Image

import crtfilter
from crtfilter import color
from conftest import SCENE, pixels, run
from crtfilter.audit import COMMON_SOURCES, output_size
from crtfilter.capture import CaptureSettings, cut, doubled_lines, source_size
from crtfilter.errors import RenderWarning, SettingsError
from crtfilter.files import read_render_record
from crtfilter.presets import RENAMED, all_presets, load_preset, settings_dict
from crtfilter.scale import parse_size

QUICK = "scanlines-only-within-1080p"


@pytest.fixture(scope="module")
def scene() -> np.ndarray:
    with Image.open(SCENE) as im:
        return np.asarray(im.convert("RGB").crop((0, 0, 96, 72)))


# --------------------------------------------------------------------------
# Captures


def test_a_line_doubled_capture_renders_as_the_frame_it_doubles(scene):
    # A 96x72 frame sent as 192x144 with every pixel drawn twice each way (nearest-neighbour
    # doubling, as a capture of a line-doubled signal; common practice, no source): taken
    # as line-doubled, each row pair is one source line and each source pixel is twice as
    # tall as the capture's, so the render is the frame's own, pixel for pixel.
    doubled = np.repeat(np.repeat(scene, 2, axis=0), 2, axis=1)
    direct = crtfilter.render(scene, preset=QUICK)
    taken = crtfilter.render(doubled, preset=QUICK, line_doubled=True)
    assert taken.shape == direct.shape
    # the same picture; the rounding that holds each cell's light carries it over runs of
    # cells that follow source pixels, and the capture's pixels are half as wide as the
    # frame's (its columns stay doubled), so a sample may land one code the other way
    assert np.abs(taken.astype(int) - direct.astype(int)).max() <= 1
    light = [color.luminance(color.decode(p)).mean(dtype=np.float64) for p in (taken, direct)]
    assert light[0] == pytest.approx(light[1], rel=2e-4)
    # with plain rounding they are the same, pixel for pixel
    plain = [crtfilter.render(f, preset=QUICK, rounding="nearest", **kw)
             for f, kw in ((scene, {}), (doubled, {"line_doubled": True}))]
    assert np.array_equal(plain[0], plain[1])


def test_a_doubled_frame_taken_as_it_is_gets_twice_the_scanlines_and_a_warning(scene, tmp_path):
    doubled = np.repeat(np.repeat(np.tile(scene, (3, 3, 1)), 2, axis=0), 2, axis=1)  # 576x432
    assert doubled_lines(doubled)
    path = tmp_path / "capture.png"
    Image.fromarray(doubled).save(path)
    result = run("render", path, "-o", tmp_path / "out.png", "--preset", QUICK)
    assert result.exit_code == 0, result.stderr
    warned = [ln for ln in result.stderr.splitlines() if ln.startswith("crtfilter: warning:")]
    assert len(warned) == 1 and "--line-doubled" in warned[0]
    result = run("render", path, "-o", tmp_path / "taken.png", "--preset", QUICK, "--line-doubled")
    assert result.exit_code == 0 and "warning" not in result.stderr
    # taken as it is: 432 lines at 2 rows each; taken as doubled: 216 lines, whole-scaled to 5
    assert read_render_record(tmp_path / "out.png")["geometry"]["source"] == [576, 432]
    assert read_render_record(tmp_path / "taken.png")["geometry"]["source"] == [576, 216]
    assert pixels(tmp_path / "out.png").shape[:2] == (864, 1152)
    assert pixels(tmp_path / "taken.png").shape[:2] == (1080, 1440)


def test_a_flat_frame_is_not_taken_for_a_doubled_one():
    assert not doubled_lines(np.full((480, 640, 3), 90, np.uint8))
    assert not doubled_lines(np.zeros((240, 320, 3), np.uint8))  # too short to be a doubled capture


def test_crop_keeps_the_rectangle_and_the_render_matches_the_frame_itself(scene):
    border = np.zeros((72 + 20, 96 + 30, 3), np.uint8)
    border[8:80, 12:108] = scene
    direct = crtfilter.render(scene, preset=QUICK)
    cropped = crtfilter.render(border, preset=QUICK, crop="12,8,96,72")
    assert np.array_equal(cropped, direct)


def test_overscan_always_leaves_a_picture():
    for n in range(1, 12):
        assert min(source_size(n, n, CaptureSettings(overscan=50))) >= 1


def test_overscan_cuts_half_the_share_from_each_side(scene):
    settings = CaptureSettings(overscan=10)
    # 10 % of 96 is 9.6 columns: 4.8, rounded to 5, from each side; of 72 rows, 3.6 -> 4
    assert source_size(96, 72, settings) == (86, 64)
    picture, _ = cut(scene, None, settings)
    assert np.array_equal(picture, scene[4:68, 5:91])


def test_crop_then_line_pairs_then_overscan():
    frame = np.arange(40 * 30 * 3, dtype=np.uint16).reshape(40, 30, 3)
    settings = CaptureSettings(crop="2,4,20,32", line_doubled=True, overscan=20)
    picture, _ = cut(frame, None, settings)
    # crop: rows 4..35, columns 2..21; pairs: rows 4, 6, ..., 34 (16 lines);
    # overscan 20 %: 2 columns and 2 lines (1.6 -> 2) from each side
    assert np.array_equal(picture, frame[4:36:2][2:14, 2:22][:, 2:18])
    assert picture.shape[:2] == source_size(30, 40, settings)[::-1]


@pytest.mark.parametrize("settings, words", [
    (CaptureSettings(crop="0,0,31,10"), "reaches past"),
    (CaptureSettings(crop="0,1,30,9", line_doubled=True), "even number of rows"),
])
def test_captures_that_cannot_be_cut_are_refused_saying_why(settings, words):
    with pytest.raises(SettingsError, match=words):
        source_size(30, 20, settings)


def test_capture_settings_refuse_bad_values():
    with pytest.raises(SettingsError, match="X,Y,W,H"):
        CaptureSettings(crop="1,2,3")
    with pytest.raises(SettingsError, match="overscan"):
        CaptureSettings(overscan=-1)


def test_a_preset_file_can_say_its_captures(tmp_path, scene):
    path = tmp_path / "capture.toml"
    path.write_text(f'extends = "{QUICK}"\n[source]\ncrop = "12,8,96,72"\noverscan = 0\n')
    border = np.zeros((92, 126, 3), np.uint8)
    border[8:80, 12:108] = scene
    assert np.array_equal(crtfilter.render(border, preset=str(path)), crtfilter.render(scene, preset=QUICK))
    path.write_text('[source]\nline_doubled = "yes"\n')
    with pytest.raises(SettingsError, match=r"\[source\] line_doubled must be true or false"):
        load_preset(path)


def test_inspect_measures_a_cropped_render_again_from_its_input(tmp_path, scene):
    border = np.zeros((92, 126, 3), np.uint8)
    border[8:80, 12:108] = scene
    src = tmp_path / "capture.png"
    Image.fromarray(border).save(src)
    out = tmp_path / "out.png"
    assert run("render", src, "-o", out, "-p", QUICK, "--crop", "12,8,96,72", "--overscan", "4").exit_code == 0
    result = run("inspect", out)
    assert result.exit_code == 0, result.stderr
    assert 'crop = "12,8,96,72"' in result.stdout.splitlines()[0]
    assert "differs" not in result.stdout and result.stdout.count("holds") >= 3


# --------------------------------------------------------------------------
# Overrides


def test_every_override_lands_in_the_settings_and_the_record(tmp_path):
    src = tmp_path / "frame.png"
    Image.open(SCENE).convert("RGB").crop((0, 0, 64, 48)).save(src)
    out = tmp_path / "out.png"
    result = run("render", src, "-o", out, "-p", QUICK, "--kernel", "cubic", "--phosphor", "slot",
                 "--triad-pitch", "4.5", "--scanline-strength", "0.4", "--beam-width", "0.9",
                 "--softness", "0.25", "--fill")
    assert result.exit_code == 0, result.stderr
    record = read_render_record(out)
    s = record["settings"]
    assert (s["output"]["kernel"], s["mask"]["phosphor"], s["mask"]["triad_pitch"]) == ("cubic", "slot", 4.5)
    assert (s["mask"]["scanline_strength"], s["mask"]["beam_width"], s["tone"]["softness"]) == (0.4, 0.9, 0.25)
    assert s["output"]["whole_scale"] is False
    assert record["options"] == {"kernel": "cubic", "whole_scale": False, "phosphor": "slot", "triad_pitch": 4.5,
                                 "scanline_strength": 0.4, "beam_width": 0.9, "softness": 0.25}
    assert record["preset"] == QUICK


def test_an_override_renders_as_a_preset_file_saying_the_same(tmp_path, scene):
    path = tmp_path / "cubic.toml"
    path.write_text(f'extends = "{QUICK}"\n[output]\nkernel = "cubic"\n[mask]\ntriad_pitch = 4.0\n'
                    'phosphor = "aperture"\n[tone]\nsoftness = 0.5\n')
    by_file = crtfilter.render(scene, preset=str(path))
    by_options = crtfilter.render(scene, preset=QUICK, kernel="cubic", triad_pitch=4.0, phosphor="aperture",
                                  softness=0.5)
    assert np.array_equal(by_file, by_options)
    assert not np.array_equal(by_options, crtfilter.render(scene, preset=QUICK))


def test_a_scanline_strength_turns_scanlines_on_and_zero_turns_them_off():
    slot = load_preset("slot-coarse-within-1080p")
    assert not slot.settings.mask.scanlines
    assert slot.with_options(scanline_strength=0.5).settings.mask.scanlines
    assert not load_preset(QUICK).with_options(scanline_strength=0).settings.mask.scanlines


def test_size_with_scale_centres_that_scale_in_that_size(tmp_path, scene):
    out = crtfilter.render(scene, preset=QUICK, size="400x300", scale=3)
    assert out.shape == (300, 400, 3)
    # 96x72 at 3 is 288x216, centred: 56 columns and 42 rows of black each side
    assert np.array_equal(out[42:258, 56:344], crtfilter.render(scene, preset=QUICK, scale=3))
    assert not out[:42].any() and not out[258:].any() and not out[:, :56].any() and not out[:, 344:].any()


def test_fill_scales_to_the_size_and_whole_scale_keeps_whole_rows(scene):
    preset = load_preset(QUICK)
    filled = preset.with_options(size="1920x1080", whole_scale=False)
    whole = preset.with_options(size="1920x1080", whole_scale=True)
    # 96x72 in 1920x1080: the height limits, 1080 / 72 = 15 exactly; in 1000x1000, 1000 / 96
    assert output_size(filled.settings, 96, 72) == (1920, 1080)
    from crtfilter.scale import plan_geometry

    g = plan_geometry(96, 72, preset.with_options(size="1000x1000", whole_scale=False).settings.geometry)
    assert (g.pic_w, g.pic_h) == (1000, 750)
    g = plan_geometry(96, 72, preset.with_options(size="1000x1000", whole_scale=True).settings.geometry)
    assert (g.pic_w, g.pic_h) == (960, 720) and (g.pic_x, g.pic_y) == (20, 140)
    assert output_size(whole.settings, 96, 72) == (1920, 1080)


# --------------------------------------------------------------------------
# Warnings


@pytest.mark.parametrize("options, words", [
    ({"scale": 0.5}, ["shrunk", "scanlines need at least 2"]),
    ({"size": "60x40"}, ["shrunk", "scanlines need at least 2"]),
    ({"scale": 1.5}, ["scanlines need at least 2"]),
    ({"scale": 2}, []),
])
def test_renders_that_cannot_show_the_look_warn_and_still_render(scene, options, words):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = crtfilter.render(scene, preset=QUICK, **options)
    texts = [str(w.message) for w in caught if issubclass(w.category, RenderWarning)]
    assert out.size > 0
    assert len(texts) == len(words)
    for text, word in zip(texts, words, strict=True):
        assert word in text


def test_a_source_of_over_1000_lines_warns():
    tall = np.zeros((1002, 16, 3), np.uint8)
    tall[::2] = 200
    with pytest.warns(RenderWarning, match="1002 lines"):
        crtfilter.render(tall, preset=QUICK, scale=2)


def test_the_command_line_gives_each_warning_one_line_on_stderr_and_renders(tmp_path):
    src = tmp_path / "frame.png"
    Image.open(SCENE).convert("RGB").crop((0, 0, 64, 48)).save(src)
    out = tmp_path / "small.png"
    result = run("render", src, "-o", out, "-p", QUICK, "--scale", "0.5")
    assert result.exit_code == 0 and out.exists()
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 2 and all(ln.startswith(f"crtfilter: warning: {src}: ") for ln in lines)
    report = tmp_path / "report.json"
    run("render", src, "-o", tmp_path / "again.png", "-p", QUICK, "--scale", "0.5", "--report", report)
    assert len(json.loads(report.read_text())[0]["warnings"]) == 2


# --------------------------------------------------------------------------
# Preset names


def test_a_preset_named_within_a_size_never_gives_more(scene):
    for preset in all_presets():
        match = re.search(r"within-(4k|1080p)$", preset.name)
        assert match, preset.name  # every shipped name says its box
        box = {"4k": (3840, 2160), "1080p": (1920, 1080)}[match.group(1)]
        for source in (*COMMON_SOURCES, "160x144", "384x224"):
            w, h = output_size(preset.settings, *parse_size(source))
            assert w <= box[0] and h <= box[1], (preset.name, source, (w, h))
            # whole-scaled: one more line each would no longer fit
            src_w, src_h = parse_size(source)
            scale = h // src_h
            assert h == scale * src_h
            assert (scale + 1) * src_h > box[1] or (scale + 1) * src_w > box[0]


def test_old_preset_names_say_the_new_one():
    for old, new in RENAMED.items():
        with pytest.raises(SettingsError, match=f"renamed '{new}'"):
            load_preset(old)
        load_preset(new)


def test_presets_lists_the_output_size_for_common_sources():
    result = run("presets", "--json")
    assert result.exit_code == 0
    rows = json.loads(result.stdout)
    for row in rows:
        settings = load_preset(row["name"]).settings
        assert row["outputs"] == {s: list(output_size(settings, *parse_size(s))) for s in COMMON_SOURCES}
    assert rows[[r["name"] for r in rows].index("aperture-fine-within-4k")]["outputs"]["320x240"] == [2880, 2160]
    table = run("presets").stdout
    assert all(s in table for s in COMMON_SOURCES) and "2880x2160" in table


def test_settings_dict_round_trips_the_new_keys():
    settings = load_preset(QUICK).with_options(crop="1,2,30,20", line_doubled=True, overscan=3).settings
    data = settings_dict(settings)
    assert data["source"]["crop"] == "1,2,30,20" and data["source"]["line_doubled"] is True
    from crtfilter.presets import settings_from_record

    assert settings_from_record(data) == settings


def test_a_lossy_file_that_moves_the_light_warns_with_what_keeps_it(tmp_path):
    src = tmp_path / "frame.png"
    Image.open(SCENE).convert("RGB").crop((0, 0, 64, 48)).save(src)
    # 4:2:0 averages each 2x2 block's colour: the red, green and blue stripes of a 3 px
    # aperture mask blur into each other and light is lost (measured in README's table)
    result = run("render", src, "-o", tmp_path / "half.jpg", "-p", "aperture-fine-within-1080p",
                 "--subsampling", "4:2:0")
    assert result.exit_code == 0, result.stderr
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert "--subsampling 4:4:4" in lines[0] and "moved the mean light by -" in lines[0]
    # and the figure itself, outside render's own bound of 1 % (--light-tolerance)
    assert len(lines) == 2 and "is outside 100 % ± 1 %" in lines[1]
    result = run("render", src, "-o", tmp_path / "full.jpg", "-p", "aperture-fine-within-1080p")
    assert result.exit_code == 0 and "warning" not in result.stderr
