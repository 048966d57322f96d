"""The HTML report: its folder, its links, and the page in a real headless browser."""

from __future__ import annotations

import re
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from conftest import CHROMEDRIVER, SAMPLES, require_browser, run
from conftest import pixels as _pixels
from PIL import Image

from crtfilter.presets import load_preset
from crtfilter.scale import plan_geometry

PRESETS = ("aperture-fine-within-1080p", "scanlines-only-within-1080p")
SMALL = (64, 48)

#: A picture "is not blank" when it has at least this many distinct colours.
MIN_COLOURS = 8

#: How long the browser may take to load a switched image, in seconds.
LOAD_WAIT = 10


def _small_copy(source: Path, target: Path, box: tuple[int, int]) -> None:
    x, y = box
    with Image.open(source) as im:
        im.convert("RGB").crop((x, y, x + SMALL[0], y + SMALL[1])).save(target)


class _Links(HTMLParser):
    """Every src and href of a page, and the tags that could fetch something."""

    def __init__(self):
        super().__init__()
        self.links: list[str] = []
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        self.links += [attrs[k] for k in ("src", "href") if attrs.get(k) is not None]


def _parsed(html_text: str) -> _Links:
    parser = _Links()
    parser.feed(html_text)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """One report: two presets on two small images, built with the command."""
    base = tmp_path_factory.mktemp("report")
    images = base / "images"
    images.mkdir()
    _small_copy(SAMPLES / "scene-320x240.png", images / "scene.png", (40, 100))
    _small_copy(SAMPLES / "chart-colour-bars-320x240.png", images / "bars.png", (100, 80))
    out = base / "out"
    result = run("report", *PRESETS, "--images", images, "-o", out)
    assert result.exit_code == 0, result.stderr
    assert "2 presets on 2 images" in result.stdout
    return out


# --------------------------------------------------------------------------
# The folder and the page's text


def test_report_folder_holds_the_page_and_every_picture(report):
    assert (report / "index.html").is_file()
    for preset in PRESETS:
        assert (report / "curves" / f"{preset}.png").is_file()
        geometry = plan_geometry(*SMALL, load_preset(preset).settings.geometry)
        for stem in ("scene", "bars"):
            with Image.open(report / "renders" / preset / f"{stem}.png") as im:
                assert im.size == (geometry.out_w, geometry.out_h)
            with Image.open(report / "thumbs" / preset / f"{stem}.png") as im:
                assert im.size[0] <= 320 and im.size[1] <= 240
            with Image.open(report / "crops" / preset / f"{stem}.png") as im:
                assert 0 < im.size[0] <= geometry.pic_w and 0 < im.size[1] <= geometry.pic_h
            assert (report / "maps" / preset / f"{stem}-energy.png").is_file()


def test_every_link_points_at_a_file_inside_the_folder(report):
    page = _parsed((report / "index.html").read_text(encoding="utf-8"))
    assert len(page.links) >= 2 + 2 * 2 * 4  # curves; per image and preset: full, thumb, map twice
    root = report.resolve()
    for link in page.links:
        target = (report / link).resolve()
        assert target.is_relative_to(root), link
        assert target.is_file(), link
    # the crops the toggle switches between are named in data-crops, not src
    crops = [attrs["data-crops"] for tag, attrs in page.tags if "data-crops" in attrs]
    assert len(crops) == 2
    for blob in crops:
        for path in re.findall(r'"(crops/[^"]+)"', blob):
            assert (report / path).is_file(), path


def test_page_fetches_nothing_from_outside(report):
    text = (report / "index.html").read_text(encoding="utf-8")
    assert "http://" not in text and "https://" not in text
    lowered = text.lower()
    assert "<script src=" not in lowered and "<link" not in lowered
    assert "@import" not in lowered and "url(" not in lowered and "@font-face" not in lowered
    page = _parsed(text)
    assert not [attrs for tag, attrs in page.tags if tag == "script" and "src" in attrs]
    assert [tag for tag, _ in page.tags].count("style") == 1  # the CSS is inline


def test_images_with_the_same_name_in_two_folders_keep_their_own_pictures(tmp_path):
    images = tmp_path / "images"
    (images / "one").mkdir(parents=True)
    (images / "two").mkdir()
    _small_copy(SAMPLES / "scene-320x240.png", images / "one" / "title.png", (40, 100))
    _small_copy(SAMPLES / "chart-colour-bars-320x240.png", images / "two" / "title.png", (100, 80))
    small = tmp_path / "small.toml"
    small.write_text('extends = "aperture-fine-within-1080p"\n[output]\nfit = "320x240"\n')
    out = tmp_path / "out"
    result = run("report", small, "--images", images, "-o", out)
    assert result.exit_code == 0, result.stderr
    text = (out / "index.html").read_text(encoding="utf-8")
    sections = text.split('<section class="image"')[1:]
    assert len(sections) == 2
    first, second = (set(_parsed(s).links) for s in sections)
    assert first and second and not first & second


# --------------------------------------------------------------------------
# The page in a headless browser


def test_missing_browser_skips_outside_ci_and_fails_in_ci(monkeypatch, tmp_path):
    gone = {"chromium": tmp_path / "no-chromium", "chromedriver": CHROMEDRIVER}
    monkeypatch.delenv("CI", raising=False)
    with pytest.raises(pytest.skip.Exception, match="no-chromium not found"):
        require_browser(**gone)
    monkeypatch.setenv("CI", "false")
    with pytest.raises(pytest.skip.Exception, match="no-chromium not found"):
        require_browser(**gone)
    monkeypatch.setenv("CI", "true")
    with pytest.raises(pytest.fail.Exception, match="CI is set, so this test must run"):
        require_browser(**gone)
    monkeypatch.setitem(sys.modules, "selenium", None)
    monkeypatch.delenv("CI")
    with pytest.raises(pytest.skip.Exception, match="selenium package is not installed"):
        require_browser()


@pytest.fixture
def page(browser, report):
    """The report freshly opened from a file:// URL, its console log emptied."""
    browser.get_log("browser")  # drop what an earlier test left
    browser.get((report / "index.html").resolve().as_uri())
    return browser


_IMAGES = """return Array.from(document.images).map(function (i) {
  return {src: i.getAttribute('src'), complete: i.complete, width: i.naturalWidth}; });"""


def _crop_state(driver, box) -> dict:
    return driver.execute_script(
        "var img = arguments[0].querySelector('img.crop');"
        "return {src: img.getAttribute('src'), complete: img.complete, width: img.naturalWidth,"
        " shown: arguments[0].querySelector('.shown').textContent,"
        " button: arguments[0].querySelector('button').textContent};", box)


def _wait_for_crop(driver, box, src: str) -> dict:
    from selenium.webdriver.support.ui import WebDriverWait

    def loaded(d) -> bool:
        state = _crop_state(d, box)
        return state["src"] == src and state["complete"] and state["width"] > 0

    WebDriverWait(driver, LOAD_WAIT).until(loaded)
    return _crop_state(driver, box)


def test_report_loads_in_a_headless_browser_with_every_image(page):
    images = page.execute_script(_IMAGES)
    assert len(images) == 2 + 2 * (2 * 2 + 1)  # curves; per image: thumbs, maps, one crop
    broken = [i["src"] for i in images if not (i["complete"] and i["width"] > 0)]
    assert not broken
    assert page.title == "crtfilter report"


def test_report_page_logs_no_console_errors(page):
    # let the inline script run to its end before reading the log
    assert page.execute_script("return document.readyState") == "complete"
    severe = [entry for entry in page.get_log("browser") if entry["level"] == "SEVERE"]
    assert not severe


def test_toggle_switches_the_crop_between_two_presets(page, report):
    import json

    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    box = page.find_elements(By.CSS_SELECTOR, ".toggle")[0]
    crops = json.loads(box.get_attribute("data-crops"))
    a_name, b_name = PRESETS
    assert set(crops) == {a_name, b_name} and crops[a_name] != crops[b_name]
    button = box.find_element(By.TAG_NAME, "button")

    state = _wait_for_crop(page, box, crops[a_name])
    assert state["shown"] == a_name and state["button"] == f"show {b_name}"
    button.click()
    state = _wait_for_crop(page, box, crops[b_name])
    assert state["shown"] == b_name and state["button"] == f"show {a_name}"
    button.click()
    _wait_for_crop(page, box, crops[a_name])

    # Swap the pair with the selects: a changed select shows its own side at once,
    # and the button then toggles between the new A and the new B.
    Select(box.find_element(By.CSS_SELECTOR, "select.a")).select_by_visible_text(b_name)
    _wait_for_crop(page, box, crops[b_name])
    Select(box.find_element(By.CSS_SELECTOR, "select.b")).select_by_visible_text(a_name)
    state = _wait_for_crop(page, box, crops[a_name])  # B's crop
    assert state["shown"] == a_name
    button.click()
    _wait_for_crop(page, box, crops[b_name])  # A's crop
    button.click()
    state = _wait_for_crop(page, box, crops[a_name])  # B's crop again
    assert state["shown"] == a_name
    # the picture shown is the file the report wrote for that preset
    with Image.open(report / crops[a_name]) as im:
        assert state["width"] == im.size[0]


def test_crop_is_shown_at_one_to_one(page):
    sizes = page.execute_script("return Array.from(document.querySelectorAll('img.crop')).map("
                                "function (i) { return [i.naturalWidth, i.naturalHeight, i.width, i.height]; });")
    assert len(sizes) == 2
    for natural_w, natural_h, shown_w, shown_h in sizes:
        assert natural_w > 0 and (shown_w, shown_h) == (natural_w, natural_h)


def test_report_screenshot_is_saved_and_not_blank(page, tmp_path):
    shot = tmp_path / "report.png"
    assert page.save_screenshot(str(shot))
    assert shot.is_file()
    rgb = _pixels(shot)
    assert rgb.shape[0] > 100 and rgb.shape[1] > 100
    assert rgb.var() > 0
    assert len(np.unique(rgb.reshape(-1, 3), axis=0)) >= MIN_COLOURS
