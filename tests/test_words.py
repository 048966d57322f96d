"""One vocabulary: each figure under one name with one definition, sizes width first, help
and errors a person can read, and `presets show` a preset file that loads back."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
import typer.main

import crtfilter
from conftest import SCENE, run
from crtfilter import color, terms
from crtfilter.audit import GREY_CODE, mask_contrast, michelson
from crtfilter.cli import app
from crtfilter.engine import render_codes
from crtfilter.presets import all_presets, load_preset, preset_toml, settings_from_dict, shipped_names

README = Path(__file__).resolve().parent.parent / "README.md"
QUICK = "scanlines-only-within-1080p"


# --------------------------------------------------------------------------
# One definition per figure


def test_the_readme_glossary_is_the_code_glossary():
    text = README.read_text()
    section = text[text.index("## Glossary"):]
    section = section[:section.index("\n## ", 3)]
    rows = [ln for ln in section.splitlines() if ln.startswith("| ") and not ln.startswith("| term")]
    found = [tuple(cell.strip().strip("`") for cell in row.strip("|").split(" | ")) for row in rows]
    assert found == [(t.name, t.key, t.meaning) for t in terms.GLOSSARY]


@pytest.mark.parametrize("name", shipped_names())
def test_mask_contrast_of_one_cell_is_that_of_a_whole_rendered_grey_field(name):
    # The definition (one period cell, computed from the mask and the curves) against a
    # whole 320x240 grey field rendered, encoded and decoded as a file would be.
    settings = load_preset(name).settings
    r = render_codes(np.full((240, 320, 3), GREY_CODE, np.uint8), settings)
    g = r.geometry
    picture = r.encoding.decode(r.codes[g.pic_y:g.pic_y + g.pic_h, g.pic_x:g.pic_x + g.pic_w, :3])
    assert mask_contrast(settings) == pytest.approx(michelson(color.luminance(picture, r.encoding.luma)),
                                                    abs=1e-9)


def test_every_screen_quotes_the_same_mask_contrast(tmp_path):
    preset = "aperture-fine-within-4k"
    shown = terms.contrast(mask_contrast(load_preset(preset).settings))
    listing = run("presets").stdout
    row = next(ln for ln in listing.splitlines() if preset in ln)
    assert shown in row
    assert f"mask contrast at 18 % grey {shown}" in run("presets", "show", preset).stdout
    compared = run("compare", SCENE, "--presets", preset, "-o", tmp_path / "c.png")
    assert compared.exit_code == 0, compared.stderr
    assert f"mask contrast {shown}" in compared.stdout
    figures = json.loads(run("presets", "--json").stdout)
    assert terms.contrast(next(r for r in figures if r["name"] == preset)["contrast"]) == shown


def test_light_kept_is_a_percentage_on_every_screen(tmp_path):
    rendered = run("render", SCENE, "-o", tmp_path / "r.png", "-p", QUICK)
    assert re.search(r"light kept \d+\.\d\d %", rendered.stdout)
    checked = run("check", QUICK, "--images", SCENE.parent, "--json", tmp_path / "c.json")
    assert checked.exit_code == 0, checked.stdout + checked.stderr
    assert re.search(r"\d+\.\d\d %", checked.stdout)
    assert not re.search(r"\b[01]\.\d{4}\b", checked.stdout)  # no bare ratios on screen
    inspected = run("inspect", tmp_path / "r.png").stdout
    assert re.search(r"light kept +recorded \d+\.\d\d %", inspected)


def test_sizes_on_screens_are_width_by_height(tmp_path):
    # a 3 px aperture triad under 240-line scanlines at 9 rows per line: 3 wide, 9 tall
    out = run("mask", "aperture-fine-within-4k", "-o", tmp_path / "m.png").stdout
    assert "period cell 3x9 px" in out
    shown = run("presets", "show", "aperture-fine-within-4k").stdout
    assert "period cell 3x9 px" in shown and "rows x columns" not in shown
    assert terms.cell((9, 3)) == "3x9 px"


# --------------------------------------------------------------------------
# presets show is a preset file


@pytest.mark.parametrize("name", shipped_names())
def test_presets_show_prints_toml_that_loads_back_to_the_same_settings(name, tmp_path):
    result = run("presets", "show", name)
    assert result.exit_code == 0, result.stderr
    data = tomllib.loads(result.stdout)  # valid TOML: no null, curves as comments
    assert settings_from_dict(data)[1] == load_preset(name).settings
    saved = tmp_path / "mine.toml"
    saved.write_text(result.stdout)
    assert load_preset(saved).settings == load_preset(name).settings
    assert "Horner" not in result.stdout and "null" not in result.stdout


def test_preset_toml_keeps_an_override_and_an_odd_description():
    preset = load_preset(QUICK).with_options(size=(1000, 800), crop="1,2,3,4")
    preset = type(preset)(preset.name, 'quotes " and \\ and é', preset.settings)
    data = tomllib.loads(preset_toml(preset))
    assert data["description"] == preset.description
    assert settings_from_dict(data)[1] == preset.settings


# --------------------------------------------------------------------------
# Help and usage errors


def _commands():
    root = typer.main.get_command(app)
    for name, command in root.commands.items():
        if hasattr(command, "commands"):
            yield [name], command
            for sub in command.commands:
                yield [name, sub], command.commands[sub]
        else:
            yield [name], command


@pytest.mark.parametrize("path", [p for p, _c in _commands()], ids=" ".join)
def test_help_shows_no_internal_type_names_and_each_default_once(path):
    result = run(*path, "--help")
    assert result.exit_code == 0
    text = result.stdout
    usage = text.splitlines()[0]
    assert usage.startswith("Usage: ") and "{" not in usage and "<" not in usage
    for word in ("<str>", "<int", "<float>", "<path>", "<list", "list[", "Path]"):
        assert word not in text, (path, word)
    entries, current = [], ""
    for line in text.splitlines():
        if re.match(r"^  -", line):  # an option's first line; its help continues below
            entries.append(current)
            current = line
        else:
            current += " " + line.strip()
    entries.append(current)
    for entry in entries:
        assert entry.count("[default:") <= 1, (path, entry)


def test_usage_mistakes_are_one_line_with_status_2(tmp_path):
    mistakes = [
        ["render", SCENE, "-o", tmp_path / "o.png", "--jobs", "-1"],
        ["render", SCENE, "-o", tmp_path / "o.png", "--scale", "big"],
        ["render", SCENE, "-o", tmp_path / "o.png", "--no-such-option"],
        ["render", SCENE],
        ["render"],
        ["rendr", SCENE],
        ["presets", "shw"],
        ["mask"],
        ["presets", "diff", QUICK],
        ["render", SCENE, "-o", tmp_path / "o.png", "--quality", "0"],
    ]
    for args in mistakes:
        result = run(*args)
        lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
        assert result.exit_code == 2, (args, result.exit_code)
        assert len(lines) == 1 and lines[0].startswith("crtfilter: error: "), (args, result.stderr)
        assert "Usage:" not in result.stderr
    assert not (tmp_path / "o.png").exists()


# --------------------------------------------------------------------------
# The Python API


def test_sizes_may_be_width_height_tuples():
    frame = np.zeros((24, 32, 3), np.uint8)
    assert crtfilter.render(frame, preset=QUICK, size=(320, 200)).shape == (200, 320, 3)
    assert np.array_equal(crtfilter.render(frame, preset=QUICK, size=(320, 200)),
                          crtfilter.render(frame, preset=QUICK, size="320x200"))
    with pytest.raises(crtfilter.SettingsError, match="whole numbers"):
        crtfilter.render(frame, preset=QUICK, size=(320.5, 200))
    with pytest.raises(crtfilter.SettingsError, match="pair"):
        crtfilter.render(frame, preset=QUICK, size=(320,))


def test_every_shipped_preset_is_listed_once():
    assert sorted(p.name for p in all_presets()) == list(shipped_names())


# --------------------------------------------------------------------------
# Suggestions by meaning and by prefix


@pytest.mark.parametrize("args, hint", [
    (["--white", "6500k"], "did you mean 'd65'?"),  # D65 is the 6500 K daylight white (CIE; common usage)
    (["--phosphor", "shadow"], "did you mean 'dots'?"),
    (["--kernel", "bicubic"], "did you mean 'cubic'?"),
    (["--preset", "slot"], "'slot-coarse-within-1080p' or 'slot-medium-within-4k'"),
    (["--kernel", "cubc"], "did you mean 'cubic'?"),
])
def test_mistaken_choices_get_the_choice_meant(args, hint, tmp_path):
    result = run("render", SCENE, "-o", tmp_path / "o.png", *args)
    assert result.exit_code == 2
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and hint in lines[0], lines
    assert "?;" not in lines[0]


def test_curves_without_a_preset_or_a_mean_says_to_give_one(tmp_path):
    result = run("curves", "-o", tmp_path / "c.png")
    assert result.exit_code == 2 and "not both" not in result.stderr and "one of them" in result.stderr


def test_images_options_take_a_file_as_well_as_a_folder(tmp_path):
    checked = run("check", QUICK, "--images", SCENE, "--json", tmp_path / "c.json")
    assert checked.exit_code == 0, checked.stdout + checked.stderr
    cases = json.loads((tmp_path / "c.json").read_text())["cases"]
    assert {c["image"] for c in cases} >= {SCENE.name}
    reported = run("report", QUICK, "--images", SCENE, "-o", tmp_path / "page")
    assert reported.exit_code == 0, reported.stderr
    assert "1 preset on 1 image" in reported.stdout
    not_image = tmp_path / "notes.txt"
    not_image.write_text("x")
    result = run("report", QUICK, "--images", not_image, "-o", tmp_path / "page2")
    assert result.exit_code == 2 and "not an image by its ending" in result.stderr


# --------------------------------------------------------------------------
# Automatic crops show where presets differ


def test_the_automatic_crop_avoids_flat_white_where_every_mask_fades(tmp_path):
    # Left: flat white, where a standard-range mask fades to white (L(1) = C(1) = 1) and
    # every preset looks alike - the busiest-looking bright area of a frame. Right: a
    # mid-grey texture, where the presets' masks differ.
    rng = np.random.default_rng(7)
    frame = np.full((60, 160, 3), 255, np.uint8)
    frame[:, 80:] = rng.integers(90, 150, size=(60, 80, 1), dtype=np.uint8)
    frame[:, 78:82] = 0  # a hard edge between them: the busiest place of all
    from PIL import Image

    path = tmp_path / "halo.png"
    Image.fromarray(frame).save(path)
    result = run("compare", path, "--presets", "aperture-fine-within-1080p,slot-coarse-within-1080p",
                 "-o", tmp_path / "c.png")
    assert result.exit_code == 0, result.stderr
    found = re.search(r"crop (\d+),(\d+) (\d+)x(\d+) source px, chosen where these presets differ most",
                      result.stdout)
    assert found, result.stdout
    assert int(found[1]) >= 80  # the whole crop lies in the textured half
