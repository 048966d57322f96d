"""The brightness gate end to end: `crtfilter check`, its JSON, JUnit XML and pyproject settings."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLES, run
from PIL import Image

from crtfilter.charts import CHARTS, bundled_samples
from crtfilter.gate import CheckSettings
from crtfilter.presets import shipped_names

SCENE = SAMPLES / "scene-320x240.png"
CHECKER = SAMPLES / "chart-checker-320x240.png"

#: A quick shipped preset for the small runs.
QUICK = "aperture-fine-within-1080p"

#: Every field a JSON case carries.
CASE_FIELDS = {"preset", "image", "kind", "value", "low", "high", "passed"}


def _error_line(result) -> str:
    """The one non-empty line a usage error leaves on stderr."""
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("crtfilter: error:"), lines[0]
    return lines[0]


def _small_images(folder: Path) -> Path:
    """Two 64x48 crops of bundled frames, so that a check over them stays quick."""
    folder.mkdir(parents=True, exist_ok=True)
    with Image.open(SCENE) as im:
        im.convert("RGB").crop((40, 100, 104, 148)).save(folder / "scene.png")
    with Image.open(CHECKER) as im:
        im.convert("RGB").crop((0, 0, 64, 48)).save(folder / "checker.png")
    return folder


def _testcases(junit: Path) -> list[ET.Element]:
    # common practice, no source: the JUnit XML layout CI systems read is
    # testsuites > testsuite > testcase, with a failure element in a failed case
    root = ET.parse(junit).getroot()
    return root.findall(".//testcase")


# ---------------------------------------------------------------------------
# The whole gate over every shipped preset and the default images, run once.


@pytest.fixture(scope="module")
def full_check(tmp_path_factory):
    folder = tmp_path_factory.mktemp("full-check")
    junit, figures = folder / "check.xml", folder / "check.json"
    result = run("check", "--junit", junit, "--json", figures)
    print(result.stdout)  # the table, for CI logs
    return result, junit, figures


def test_check_passes_on_every_shipped_preset_with_the_default_bounds(full_check):
    result, _junit, figures = full_check
    assert result.exit_code == 0, result.stdout + result.stderr
    data = json.loads(figures.read_text())
    assert data["passed"] is True
    defaults = CheckSettings()
    assert data["bounds"] == {"min_ratio": defaults.min_ratio, "max_ratio": defaults.max_ratio,
                              "min_contrast": defaults.min_contrast}
    assert {c["preset"] for c in data["cases"]} == set(shipped_names())
    assert all(c["passed"] for c in data["cases"])
    assert f"all {len(data['cases'])} checks passed" in result.stdout


def test_full_check_junit_has_one_testcase_per_preset_and_image_plus_contrast(full_check):
    _result, junit, _figures = full_check
    presets = len(shipped_names())
    images = len(bundled_samples()) + len(CHARTS)
    # common practice, no source: JUnit XML counts its cases and failures in the
    # tests and failures attributes of testsuites and testsuite
    root = ET.parse(junit).getroot()
    cases = root.findall(".//testcase")
    assert len(cases) == presets * images + presets
    assert root.get("tests") == str(len(cases)) and root.get("failures") == "0"
    assert not root.findall(".//failure")
    contrast = [tc for tc in cases if tc.get("name").startswith("mask contrast")]
    assert len(contrast) == presets


def test_json_cases_carry_preset_image_kind_value_bounds_and_verdict(full_check):
    _result, _junit, figures = full_check
    cases = json.loads(figures.read_text())["cases"]
    for case in cases:
        assert CASE_FIELDS <= set(case), case
    light = [c for c in cases if c["kind"] == "light"]
    contrast = [c for c in cases if c["kind"] == "contrast"]
    assert len(light) + len(contrast) == len(cases)
    defaults = CheckSettings()
    for c in light:
        assert (c["low"], c["high"]) == (defaults.min_ratio, defaults.max_ratio)
        assert c["passed"] == (c["low"] <= c["value"] <= c["high"])
    for c in contrast:
        assert (c["low"], c["high"]) == (defaults.min_contrast, None)
        assert c["passed"] == (c["value"] >= c["low"])


# ---------------------------------------------------------------------------
# Presets meant to fail, on a small folder.

DARKENS = 'description = "a plain multiply by the mask"\n[tone]\ncurve = "multiply"\n'
NO_MASK = ('description = "no visible mask"\n[output]\nfit = "1920x1080"\n'
           '[mask]\nphosphor_strength = 0.0\nscanlines = false\n')


@pytest.fixture(scope="module")
def failing_check(tmp_path_factory):
    folder = tmp_path_factory.mktemp("failing-check")
    images = _small_images(folder / "images")
    darkens, flat = folder / "darkens.toml", folder / "flat.toml"
    darkens.write_text(DARKENS)
    flat.write_text(NO_MASK)
    junit, figures = folder / "check.xml", folder / "check.json"
    result = run("check", darkens, flat, QUICK, "--images", images, "--junit", junit, "--json", figures)
    return result, junit, json.loads(figures.read_text())


def test_check_fails_for_a_preset_that_darkens_and_one_without_mask_contrast(failing_check):
    result, _junit, data = failing_check
    assert result.exit_code == 1
    assert data["passed"] is False
    failed = {(c["preset"], c["kind"]) for c in data["cases"] if not c["passed"]}
    # the multiply darkens every image but shows its mask; the flat one holds
    # the light but shows no mask; the shipped one passes both
    assert failed == {("darkens", "light"), ("flat", "contrast")}
    dark = [c for c in data["cases"] if c["preset"] == "darkens" and c["kind"] == "light"]
    assert len(dark) == 2 and all(c["value"] < 0.5 for c in dark)
    flat = next(c for c in data["cases"] if c["preset"] == "flat" and c["kind"] == "contrast")
    assert flat["value"] < 0.01
    assert "3 of 9 checks failed" in result.stderr


def test_junit_xml_counts_testcases_and_failures_and_names_preset_and_image(failing_check):
    _result, junit, data = failing_check
    root = ET.parse(junit).getroot()
    cases = root.findall(".//testcase")
    presets, images = 3, 2
    assert len(cases) == presets * images + presets
    failing = [c for c in data["cases"] if not c["passed"]]
    assert len(root.findall(".//failure")) == len(failing) == 3
    assert root.get("failures") == str(len(failing))
    assert root.find("testsuite").get("failures") == str(len(failing))
    # cases are written in the order of the JSON, one testcase each
    for tc, case in zip(cases, data["cases"], strict=True):
        assert tc.get("classname") == f"crtfilter.{case['preset']}"
        if case["kind"] == "light":
            assert tc.get("name").startswith(case["image"])
        failure = tc.find("failure")
        assert (failure is None) == case["passed"]
        if failure is not None:
            message = failure.get("message")
            if case["kind"] == "light":
                assert f"{case['value']:.4f}" in message
                assert str(case["low"]) in message and str(case["high"]) in message
            else:
                assert f"{case['value']:.3f}" in message and str(case["low"]) in message
            assert f"{case['value']:.6f}" in failure.text


# ---------------------------------------------------------------------------
# Usage errors


@pytest.mark.parametrize("case", ["unknown-preset", "missing-folder", "empty-folder"])
def test_usage_errors_exit_2_with_one_error_line(case, tmp_path):
    images = _small_images(tmp_path / "images")
    args = ["check", QUICK, "--images", images]
    if case == "unknown-preset":
        args[1], expect = "aperture-fine-1080", "did you mean 'aperture-fine-within-1080p'"
    elif case == "missing-folder":
        args[3], expect = tmp_path / "nowhere", "no such file or folder"
    else:
        empty = tmp_path / "empty"
        empty.mkdir()
        (empty / "notes.txt").write_text("no pictures here")
        args[3], expect = empty, "no images in this folder"
    result = run(*args)
    assert result.exit_code == 2
    assert expect in _error_line(result)
    assert "Traceback" not in result.stdout + result.stderr


def test_report_in_a_missing_folder_is_not_a_traceback(tmp_path):
    images = _small_images(tmp_path / "images")
    junit = tmp_path / "reports" / "check.xml"
    result = run("check", QUICK, "--images", images, "--junit", junit)
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    if result.exit_code == 0:
        assert junit.is_file()
    else:
        assert result.exit_code == 2
        assert "reports" in _error_line(result)


# ---------------------------------------------------------------------------
# pyproject.toml settings


def _pyproject(folder: Path, table: str) -> None:
    # PEP 518: a tool keeps its settings in its own [tool.<name>] table of pyproject.toml
    (folder / "pyproject.toml").write_text('[project]\nname = "game-stills"\n\n'
                                           "[tool.crtfilter.check]\n" + table)


def test_pyproject_settings_are_honoured_and_flags_override_them(tmp_path, monkeypatch):
    _small_images(tmp_path / "frames")
    (tmp_path / "out").mkdir()
    _pyproject(tmp_path, f'presets = ["{QUICK}"]\nimages = "frames"\n'
                         'min_ratio = 2.0\nmax_ratio = 3.0\njunit = "out/gate.xml"\n')
    monkeypatch.chdir(tmp_path)
    junit = tmp_path / "out" / "gate.xml"

    strict = run("check")
    assert strict.exit_code == 1
    assert junit.is_file()
    cases = _testcases(junit)
    # only the named preset, only the two images of the configured folder
    assert {tc.get("classname") for tc in cases} == {f"crtfilter.{QUICK}"}
    assert len(cases) == 2 + 1
    light = [tc for tc in cases if tc.get("name").endswith("light kept")]
    assert {tc.get("name") for tc in light} == {"checker.png: light kept", "scene.png: light kept"}
    assert all(tc.find("failure") is not None for tc in light)
    assert "[2.0, 3.0]" in light[0].find("failure").get("message")

    again = run("check", "--min-ratio", "0.5")  # the last run's report stays unless --force
    assert again.exit_code == 2 and "use --force" in _error_line(again)
    relaxed = run("check", "--min-ratio", "0.5", "--force")
    assert relaxed.exit_code == 0, relaxed.stdout + relaxed.stderr
    cases = _testcases(junit)
    assert not any(tc.find("failure") is not None for tc in cases)
    assert "[0.5, 3.0]" in cases[0].find("system-out").text


def test_unknown_pyproject_key_exits_2_with_a_suggestion(tmp_path, monkeypatch):
    _pyproject(tmp_path, "min_ratoi = 0.98\n")
    monkeypatch.chdir(tmp_path)
    result = run("check", QUICK)
    assert result.exit_code == 2
    line = _error_line(result)
    assert "min_ratoi" in line and "did you mean 'min_ratio'" in line


# ---------------------------------------------------------------------------
# Energy maps


def test_maps_writes_one_energy_map_per_preset_and_image(tmp_path):
    images = _small_images(tmp_path / "images")
    maps = tmp_path / "maps"
    result = run("check", QUICK, "--images", images, "--maps", maps)
    assert result.exit_code == 0, result.stdout + result.stderr
    written = sorted(p.relative_to(maps).as_posix() for p in maps.rglob("*.png"))
    assert written == [f"{QUICK}/checker-energy.png", f"{QUICK}/scene-energy.png"]
    for path in maps.rglob("*.png"):
        # reference library: Pillow decodes the maps, independently of the writer
        with Image.open(path) as im:
            assert im.format == "PNG"
            pixels = np.asarray(im.convert("RGB"))
        assert pixels.std() > 0
