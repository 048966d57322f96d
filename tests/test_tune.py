"""crtfilter tune: the local server's guards, the page's controls and saving, and the page
in a real browser (Debian's chromium through selenium)."""

from __future__ import annotations

import http.client
import json
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import SAMPLES, require_browser

from crtfilter.live.controls import RANGES, controls, preset_from_values
from crtfilter.live.server import TuneServer
from crtfilter.live.session import Newest, Session, Stale
from crtfilter.presets import load_preset, load_preset_file, settings_from_dict, shipped_names

SCENE = SAMPLES / "scene-320x240.png"
START = "aperture-fine-within-4k"
WAIT = 30.0


@pytest.fixture
def server(tmp_path):
    """A tuning server on the bundled scene, saving into tmp_path, serving in a thread."""
    work = tmp_path / "work"
    work.mkdir()
    srv = TuneServer(Session.open(SCENE, load_preset(START)), folder=work)
    thread = threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    thread.start()
    try:
        yield srv
    finally:
        srv.shutdown()
        srv.server_close()
        thread.join(WAIT)


def ask(srv, method: str, path: str, body=None, *, token: str | None = "", headers=None):
    """One request as a page (or another site) would send it: status, headers, body."""
    conn = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=WAIT)
    sent = {"Host": f"127.0.0.1:{srv.port}", **(headers or {})}
    if token is not None:
        sent["X-Token"] = srv.token if token == "" else token
    data = body if isinstance(body, (bytes, type(None))) else json.dumps(body).encode()
    if data is not None:
        sent["Content-Type"] = "application/json"
    try:
        conn.request(method, path, body=data, headers=sent)
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


def view(srv, values, box=None, seq=1):
    w, h = 2880, 2160
    top, bottom, left, right = box or (0, h, 0, w)
    status, headers, data = ask(srv, "POST", "/api/view", {"seq": seq, "values": values, "top": top,
                                                          "bottom": bottom, "left": left, "right": right})
    assert status == 200, data
    head = json.loads(headers["X-View"])
    return head, np.frombuffer(data, np.uint8).reshape(head["rows"], head["columns"], 4)


# --------------------------------------------------------------------------
# What the server lets in


def test_the_server_binds_the_loopback_interface_only(server):
    assert server.server_address[0] == "127.0.0.1"
    assert server.url.startswith(f"http://127.0.0.1:{server.port}/?token=")
    assert len(server.token) >= 32  # 24 random bytes, URL-safe


@pytest.mark.parametrize("path", ["/", "/page.js", "/page.css", "/api/start"])
def test_a_request_without_the_token_or_with_a_wrong_one_is_refused(server, path):
    assert ask(server, "GET", path, token=None)[0] == 403
    assert ask(server, "GET", path, token="not-the-token")[0] == 403
    assert ask(server, "GET", f"{path}?token=not-the-token", token=None)[0] == 403
    assert ask(server, "GET", f"{path}?token={server.token}", token=None)[0] in (200,)


def test_a_foreign_host_header_is_refused(server):
    # a rebinding attack reaches 127.0.0.1 under its own name, which the browser sends as Host
    for host in ("evil.example", f"evil.example:{server.port}", "127.0.0.1", f"127.0.0.1:{server.port + 1}"):
        status, _, body = ask(server, "GET", "/api/start", headers={"Host": host})
        assert status == 403 and b"Host" in body, host
    assert ask(server, "GET", "/api/start", headers={"Host": f"localhost:{server.port}"})[0] == 200


def test_a_request_from_another_origin_is_refused(server):
    for origin in ("http://evil.example", f"http://127.0.0.1:{server.port + 1}", "null"):
        status, _, body = ask(server, "POST", "/api/figures", {"seq": 1}, headers={"Origin": origin})
        assert status == 403 and b"origin" in body, origin
    status, _, _ = ask(server, "POST", "/api/check", {}, headers={"Origin": f"http://127.0.0.1:{server.port}"})
    assert status == 200
    assert ask(server, "GET", "/api/start", headers={"Sec-Fetch-Site": "cross-site"})[0] == 403


def test_the_page_loads_nothing_from_elsewhere(server):
    status, headers, body = ask(server, "GET", "/")
    assert status == 200
    csp = headers["Content-Security-Policy"]
    assert "default-src 'none'" in csp and "script-src 'self'" in csp and "connect-src 'self'" in csp
    text = body.decode()
    assert "http://" not in text and "https://" not in text and "//" not in text.replace("://", "")
    assert server.token in text  # its own files are fetched with the token
    for name in ("page.js", "page.css"):
        status, _, body = ask(server, "GET", f"/{name}")
        assert status == 200 and b"http://" not in body and b"https://" not in body


def test_malformed_and_out_of_range_settings_get_a_clear_message_not_a_500(server):
    cases = [
        (b"not json", "not JSON"),
        (b"[1, 2]", "JSON object"),
        ({"seq": "one"}, "seq must be a whole number"),
        ({"seq": 1, "values": [1]}, "values must be an object"),
        ({"seq": 1, "values": {"mask": {"triad_pitch": 99}}}, "triad_pitch must be between 1.5 and 64"),
        ({"seq": 1, "values": {"mask": {"triad_pich": 3}}}, "did you mean 'triad_pitch'"),
        ({"seq": 1, "values": {"mask": {"triad_pitch": "wide"}}}, "triad_pitch must be a number"),
        ({"seq": 1, "values": {"mask": {"scanlines": 3}}}, "scanlines must be true or false"),
        ({"seq": 1, "values": {"masks": {}}}, "unknown table or key 'masks'"),
        ({"seq": 1, "values": {"output": {"kernel": "cubc"}}}, "did you mean 'cubic'"),
        ({"seq": 1, "values": {"mask": {"triad_pitch": None}}}, "cannot leave it unset"),
    ]
    for body, words in cases:
        for path in ("/api/figures", "/api/view"):
            payload = body if isinstance(body, bytes) else {**body, "top": 0, "bottom": 9, "left": 0, "right": 9}
            status, _, out = ask(server, "POST", path, payload)
            assert status == 400, (path, body, out)
            assert words in json.loads(out)["error"], (path, body, out)
    conn = http.client.HTTPConnection("127.0.0.1", server.port, timeout=WAIT)
    try:  # a body too large is refused on its length, unread
        conn.putrequest("POST", "/api/view", skip_host=True)
        for k, v in (("Host", f"127.0.0.1:{server.port}"), ("X-Token", server.token),
                     ("Content-Length", str(2 << 20))):
            conn.putheader(k, v)
        conn.endheaders()
        assert conn.getresponse().status == 413
    finally:
        conn.close()
    assert ask(server, "GET", "/nowhere")[0] == 404
    assert ask(server, "PUT", "/api/save", {})[0] == 405


# --------------------------------------------------------------------------
# The controls are the loader's own settings


def test_every_preset_setting_has_a_control_grouped_by_its_table():
    from crtfilter.presets import settings_dict

    groups = controls(load_preset(START))
    shown = {g["table"]: [c["key"] for c in g["controls"]] for g in groups}
    expected = settings_dict(load_preset(START).settings, written_depth=False)
    assert shown == {t: list(keys) for t, keys in expected.items()}
    assert [g["heading"] for g in groups] == ["Source", "Size and output", "Mask", "Tone", "Glow"]


def test_each_range_a_control_offers_is_the_range_the_preset_loader_allows():
    # both ends load; a step beyond either end is refused by the loader itself
    for (table, key), (lo, hi) in RANGES.items():
        if (table, key) in {("output", "peak"), ("output", "scale")}:
            continue  # the peak's floor is the reference white, the scale's is open: below
        extra = {"output": {"range": "hdr"}} if table == "output" else {}
        for good in (lo, hi):
            settings_from_dict({**extra, table: {**extra.get(table, {}), key: good}})
        for bad in (lo - 0.01 * (hi - lo) - 1e-3, hi + 0.01 * (hi - lo) + 1e-3):
            with pytest.raises(Exception, match=key.split("_")[0] if table != "glow" else "glow"):
                settings_from_dict({**extra, table: {**extra.get(table, {}), key: bad}})
    settings_from_dict({"output": {"scale": 64}})
    for bad in (0, 64.5):
        with pytest.raises(Exception, match="scale"):
            settings_from_dict({"output": {"scale": bad}})
    settings_from_dict({"output": {"range": "hdr", "reference_white": 203, "peak": 10000}})
    with pytest.raises(Exception, match="peak must be between reference_white"):
        settings_from_dict({"output": {"range": "hdr", "reference_white": 203, "peak": 202}})


def test_numbers_typed_as_text_are_read_as_numbers_and_checked():
    start = load_preset(START)
    assert preset_from_values(start, {"mask": {"triad_pitch": " 4.5 "}}).settings.mask.triad_pitch == 4.5
    with pytest.raises(Exception, match="triad_pitch must be a number"):
        preset_from_values(start, {"mask": {"triad_pitch": "4,5"}})


# --------------------------------------------------------------------------
# Views, figures, and stale requests


def test_a_view_is_the_part_of_the_render_on_screen(server):
    from crtfilter.engine import render_codes
    from crtfilter.files import read_image

    values = {"mask": {"triad_pitch": 4.25, "phosphor_strength": 0.8}}
    head, part = view(server, values, (700, 1100, 1000, 1640))
    assert (head["top"], head["left"], head["rows"], head["columns"]) == (700, 1000, 400, 640)
    full = render_codes(read_image(SCENE).codes, preset_from_values(load_preset(START), values).settings).codes
    assert np.array_equal(part[..., :3], full[700:1100, 1000:1640])
    assert (part[..., 3] == 255).all()


def test_figures_follow_the_settings(server):
    def figures(values):
        status, _, body = ask(server, "POST", "/api/figures", {"seq": 1, "values": values})
        assert status == 200, body
        return json.loads(body)

    a, b = figures(None), figures({"mask": {"phosphor_strength": 0.3}})
    assert a["light_kept"] == pytest.approx(1.0, abs=0.01)  # the method's promise
    assert b["contrast_18"] < a["contrast_18"]  # a weaker mask shows less
    assert 0 <= a["contrast_90"] <= 1 and a["local_p99"] is not None
    assert a["mask_png"].startswith("data:image/png;base64,")
    assert {c["label"] for c in a["curves"]["channels"]} <= {"R", "G", "B", "RGB", "RG", "GB", "RB"}


def test_a_request_still_waiting_when_a_newer_one_comes_is_dropped():
    queue, holding, release = Newest(), threading.Event(), threading.Event()
    results: dict = {}

    def slow():
        holding.set()
        release.wait(WAIT)
        return "first"

    def send(seq, work):
        try:
            results[seq] = queue.run("view", seq, work)
        except Stale:
            results[seq] = "dropped"

    first = threading.Thread(target=send, args=(1, slow))
    first.start()
    holding.wait(WAIT)  # seq 1 renders; 2 waits behind it, then 3 arrives
    second = threading.Thread(target=send, args=(2, lambda: "second"))
    second.start()
    deadline = time.monotonic() + WAIT
    while queue._newest.get("view") != 2 and time.monotonic() < deadline:
        time.sleep(0.001)
    third = threading.Thread(target=send, args=(3, lambda: "third"))
    third.start()
    while queue._newest.get("view") != 3 and time.monotonic() < deadline:
        time.sleep(0.001)
    release.set()
    for t in (first, second, third):
        t.join(WAIT)
    assert results == {1: "first", 2: "dropped", 3: "third"}
    send(2, lambda: "late")  # one older than the newest seen is dropped at once
    assert results[2] == "dropped" and queue.dropped == 2


def test_a_dropped_request_is_answered_without_an_error(server):
    # the page's newest-first flow must not fill the console with failed requests
    server.session.queue._newest[("view", "page")] = 5
    status, headers, body = ask(server, "POST", "/api/view", {"client": "page", "seq": 4, "top": 0, "bottom": 8,
                                                            "left": 0, "right": 8})
    assert status == 204 and headers["X-Stale"] == "1" and body == b""
    status, _, _ = ask(server, "POST", "/api/view", {"client": "another page", "seq": 1, "top": 0, "bottom": 8,
                                                     "left": 0, "right": 8})
    assert status == 200


# --------------------------------------------------------------------------
# Saving


def test_a_saved_preset_extends_the_start_holds_only_the_differences_and_renders_what_was_shown(server, tmp_path):
    values = {"mask": {"triad_pitch": 3.5, "scanline_strength": 0.4}, "tone": {"softness": 0.25}}
    status, _, body = ask(server, "POST", "/api/save", {"name": "warm-stripes", "description": "for the store page",
                                                       "values": values})
    assert status == 200, body
    saved = Path(json.loads(body)["path"])
    assert saved == (server.folder / "warm-stripes.toml").resolve()
    import tomllib

    data = tomllib.loads(saved.read_text())
    assert data == {"extends": START, "description": "for the store page",
                    "mask": {"triad_pitch": 3.5, "scanline_strength": 0.4}, "tone": {"softness": 0.25}}
    # what the page showed of the whole frame is, byte for byte, what render writes with it
    _head, shown = view(server, values)
    out = tmp_path / "rendered.png"
    done = subprocess.run([sys.executable, "-m", "crtfilter", "render", str(SCENE), "-p", str(saved), "-o", str(out),
                           "-q"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    from conftest import pixels

    assert np.array_equal(pixels(out), shown[..., :3])
    assert load_preset_file(saved).settings == preset_from_values(load_preset(START), values).settings


def test_saving_never_leaves_the_working_folder(server, tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    (server.folder / "link").symlink_to(outside)
    for name in ("../escape.toml", str(outside / "abs.toml"), "link/through.toml", "/etc/crtfilter.toml"):
        status, _, body = ask(server, "POST", "/api/save", {"name": name, "values": {}})
        assert status == 403, (name, body)
        assert "inside the working folder" in json.loads(body)["error"]
    assert list(outside.iterdir()) == []
    for name, words in (("", "file name"), ("look.txt", "ends in .toml"), ("nofolder/look.toml", "no such folder")):
        status, _, body = ask(server, "POST", "/api/save", {"name": name, "values": {}})
        assert status == 400 and words in json.loads(body)["error"], name


def test_an_existing_file_is_replaced_only_when_confirmed(server):
    target = server.folder / "look.toml"
    target.write_text("# mine\n")
    body = {"name": "look.toml", "values": {"mask": {"triad_pitch": 4}}}
    status, _, out = ask(server, "POST", "/api/save", body)
    assert status == 200 and json.loads(out)["saved"] is False and json.loads(out)["exists"] is True
    assert "confirm" in json.loads(out)["error"]
    assert target.read_text() == "# mine\n"
    status, _, out = ask(server, "POST", "/api/save", {**body, "overwrite": "yes"})  # only true confirms
    assert json.loads(out)["saved"] is False and target.read_text() == "# mine\n"
    status, _, out = ask(server, "POST", "/api/save", {**body, "overwrite": True})
    assert status == 200 and json.loads(out)["saved"] is True and json.loads(out)["replaced"] is True
    assert load_preset_file(target).settings.mask.triad_pitch == 4


def test_a_preset_file_started_from_is_extended_by_its_path_and_never_replaced(tmp_path):
    work = tmp_path / "work"
    (work / "looks").mkdir(parents=True)
    base = work / "looks" / "base.toml"
    base.write_text('extends = "slot-medium-within-4k"\n[mask]\nslot_gap = 0.3\n')
    srv = TuneServer(Session.open(SCENE, load_preset(str(base))), folder=work)
    thread = threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    thread.start()
    try:
        status, _, out = ask(srv, "POST", "/api/save", {"name": "looks/base.toml", "values": {}, "overwrite": True})
        assert status == 409 and "starting preset's own file" in json.loads(out)["error"]
        status, _, out = ask(srv, "POST", "/api/save", {"name": "mine.toml", "values": {"mask": {"slot_gap": 0.5}}})
        assert status == 200, out
        assert 'extends = "looks/base.toml"' in (work / "mine.toml").read_text()
        loaded = load_preset_file(work / "mine.toml")
        assert loaded.settings.mask.slot_gap == 0.5 and loaded.settings.mask.phosphor == "slot"
    finally:
        srv.shutdown()
        srv.server_close()


# --------------------------------------------------------------------------
# The command


def test_tune_refuses_a_missing_image_or_preset_in_one_line(tmp_path):
    from conftest import run

    for args, words in (([tmp_path / "none.png"], "none.png"), ([SCENE, "-p", "nosuch"], "unknown preset 'nosuch'")):
        result = run("tune", *args)
        assert result.exit_code == 2
        lines = [line for line in result.output.splitlines() if line.strip()]
        assert len(lines) == 1 and words in lines[0] and "Traceback" not in result.output


@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "sigterm"])
def test_tune_prints_its_local_address_and_stops_cleanly(tmp_path, how):
    proc = subprocess.Popen([sys.executable, "-m", "crtfilter", "tune", str(SCENE)], cwd=tmp_path,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        lines = [proc.stdout.readline() for _ in range(3)]
        url = next(line.split()[1] for line in lines if line.startswith("open "))
        assert url.startswith("http://127.0.0.1:") and "token=" in url
        assert "127.0.0.1 only" in lines[2]
        proc.send_signal(how)
        out, err = proc.communicate(timeout=WAIT)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "stopped; saved nothing" in err and "Traceback" not in err


# --------------------------------------------------------------------------
# The page in a real browser

def _open(browser, srv):
    from selenium.webdriver.support.ui import WebDriverWait

    browser.get_log("browser")
    browser.get(srv.url)
    WebDriverWait(browser, WAIT).until(lambda d: d.execute_script(
        "return document.body.dataset.viewSeq && document.body.dataset.figuresSeq && "
        "document.getElementById('light-kept').textContent !== '-'"))


_PIXELS = """var c = document.getElementById('view'); var g = c.getContext('2d');
var d = g.getImageData(arguments[0], arguments[1], arguments[2], arguments[3]).data;
var h = 0; for (var i = 0; i < d.length; i++) { h = (h * 31 + d[i]) >>> 0; } return [c.width, c.height, h];"""


def _settled(browser, what: str, before: str):
    from selenium.webdriver.support.ui import WebDriverWait

    WebDriverWait(browser, WAIT).until(lambda d: d.execute_script(f"return document.body.dataset.{what}") != before)
    time.sleep(0.3)  # a newer request may follow the first answer
    WebDriverWait(browser, WAIT).until(lambda d: d.execute_script(
        "return !document.querySelector('#status').textContent.startsWith('starting')"))


def _move(browser, table: str, key: str, value):
    browser.execute_script(
        "var s = document.getElementById(arguments[0]); s.value = arguments[1];"
        "s.dispatchEvent(new Event('input', {bubbles: true}));", f"c-{table}-{key}", value)


def test_the_page_in_a_browser_loads_renders_switches_and_saves(server, browser, tmp_path):
    require_browser()
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    _open(browser, server)
    assert browser.title == f"crtfilter tune: {SCENE.name}"
    severe = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert not severe
    groups = [e.text for e in browser.find_elements(By.CSS_SELECTOR, "fieldset legend")]
    assert groups == ["Source", "Size and output", "Mask", "Tone", "Glow"]
    box = (0, 0, 300, 200)
    first = browser.execute_script(_PIXELS, *box)
    assert first[:2] == [2880, 2160]
    contrast = browser.find_element(By.ID, "contrast-18").text

    # moving a control changes the picture and the figures
    view_seq = browser.execute_script("return document.body.dataset.viewSeq")
    fig_seq = browser.execute_script("return document.body.dataset.figuresSeq")
    _move(browser, "mask", "phosphor_strength", "0.3")
    _settled(browser, "viewSeq", view_seq)
    _settled(browser, "figuresSeq", fig_seq)
    moved = browser.execute_script(_PIXELS, *box)
    assert moved != first
    WebDriverWait(browser, WAIT).until(lambda d: d.find_element(By.ID, "contrast-18").text != contrast)
    changed = browser.find_elements(By.CSS_SELECTOR, ".control.changed")
    assert [e.get_attribute("data-key") for e in changed] == ["phosphor_strength"]

    # A shows the starting preset again, B the settings
    view_seq = browser.execute_script("return document.body.dataset.viewSeq")
    browser.find_element(By.ID, "ab").click()
    _settled(browser, "viewSeq", view_seq)
    assert browser.execute_script("return document.body.dataset.showing") == "A"
    assert browser.execute_script(_PIXELS, *box) == first
    WebDriverWait(browser, WAIT).until(lambda d: d.find_element(By.ID, "contrast-18").text == contrast)
    view_seq = browser.execute_script("return document.body.dataset.viewSeq")
    browser.find_element(By.ID, "ab").click()
    _settled(browser, "viewSeq", view_seq)
    assert browser.execute_script(_PIXELS, *box) == moved

    # reset brings every setting back to the start's, and its picture
    view_seq = browser.execute_script("return document.body.dataset.viewSeq")
    browser.find_element(By.ID, "reset").click()
    _settled(browser, "viewSeq", view_seq)
    assert not browser.find_elements(By.CSS_SELECTOR, ".control.changed")
    assert browser.execute_script(_PIXELS, *box) == first
    view_seq = browser.execute_script("return document.body.dataset.viewSeq")
    _move(browser, "mask", "phosphor_strength", "0.3")
    _settled(browser, "viewSeq", view_seq)
    assert browser.execute_script(_PIXELS, *box) == moved

    # zoom is nearest: 2x shows each pixel as 2x2
    browser.find_element(By.ID, "zoom-2").click()
    assert browser.execute_script("return document.getElementById('view').style.width") == "5760px"
    assert browser.execute_script("return getComputedStyle(document.getElementById('view')).imageRendering") \
        == "pixelated"
    browser.find_element(By.ID, "zoom-1").click()

    # save: the file loads, and renders what the page shows
    browser.find_element(By.ID, "save-name").send_keys("weaker-mask.toml")
    browser.find_element(By.ID, "save").click()
    WebDriverWait(browser, WAIT).until(lambda d: d.execute_script("return document.body.dataset.saved"))
    saved = server.folder / "weaker-mask.toml"
    loaded = load_preset_file(saved)
    assert loaded.settings.mask.phosphor_strength == 0.3
    _, shown = view(server, {"mask": {"phosphor_strength": 0.3}}, (0, 200, 0, 300))
    from crtfilter.engine import render_codes
    from crtfilter.files import read_image

    assert np.array_equal(render_codes(read_image(SCENE).codes, loaded.settings).codes[:200, :300], shown[..., :3])
    page_hash = browser.execute_script(_PIXELS, *box)
    assert page_hash == moved

    # saving again asks before replacing
    browser.find_element(By.ID, "save").click()
    WebDriverWait(browser, WAIT).until(lambda d: d.find_element(By.ID, "confirm-replace").is_displayed())
    assert "confirm" in browser.find_element(By.ID, "save-message").text
    browser.find_element(By.ID, "confirm-replace").click()
    WebDriverWait(browser, WAIT).until(lambda d: "replaced" in d.find_element(By.ID, "save-message").text)
    assert not [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]


def test_a_bad_value_typed_in_the_page_says_why(server, browser):
    require_browser()
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    _open(browser, server)
    field = browser.find_element(By.CSS_SELECTOR, '.control[data-key="triad_pitch"] input[type=number]')
    field.clear()
    field.send_keys("99\n")
    browser.execute_script("arguments[0].dispatchEvent(new Event('change'))", field)
    WebDriverWait(browser, WAIT).until(lambda d: d.find_element(By.ID, "message").is_displayed())
    assert "triad_pitch must be between 1.5 and 64" in browser.find_element(By.ID, "message").text
    assert browser.find_elements(By.CSS_SELECTOR, '.control.bad[data-key="triad_pitch"]')


def test_every_shipped_preset_starts_a_page(tmp_path):
    # cold and warm alike: each preset's start data, a view and its figures
    for name in shipped_names():
        srv = TuneServer(Session.open(SCENE, load_preset(name)), folder=tmp_path)
        thread = threading.Thread(target=srv.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
        thread.start()
        try:
            status, _, body = ask(srv, "GET", "/api/start")
            assert status == 200 and json.loads(body)["start"] == name
            status, headers, _ = ask(srv, "POST", "/api/view", {"seq": 1, "top": 0, "bottom": 64, "left": 0,
                                                                "right": 64})
            assert status == 200, name
            status, _, body = ask(srv, "POST", "/api/figures", {"seq": 1})
            assert status == 200, (name, body)
            assert json.loads(body)["light_kept"] is not None
        finally:
            srv.shutdown()
            srv.server_close()


@pytest.mark.parametrize("preset", shipped_names())
def test_the_pages_mask_contrast_is_the_figure_reports_give(preset):
    # the page takes it from one cell row of a grey field rendered by the fast path
    from crtfilter.audit import grey_code, mask_contrast
    from crtfilter.live.session import grey_field_contrast

    settings = load_preset(preset).settings
    for level in (0.18, 0.90):
        code = grey_code(level)
        assert grey_field_contrast(settings, (320, 240), code) == pytest.approx(
            mask_contrast(settings, (320, 240), code=code), abs=1e-12)
