"""The fast path against the reference path, and numba's cache folder."""

from __future__ import annotations

import dataclasses
import os
import subprocess
import sys

import numpy as np
import pytest
from conftest import SAMPLES
from PIL import Image

from crtfilter.masks import PHOSPHORS, MaskSettings
from crtfilter.color import PQ_BLACK
from crtfilter.engine import render_codes
from crtfilter.plan import Settings
from crtfilter.presets import all_presets
from crtfilter.scale import KERNELS, GeometrySettings
from crtfilter.tone import ToneSettings

#: The fast path may round a value the other way at a tie: one code value.
ONE_CODE = 1


@pytest.fixture(scope="module")
def scene() -> np.ndarray:
    with Image.open(SAMPLES / "scene-256x224.png") as im:
        return np.asarray(im.convert("RGB"))[40:88, 60:124].copy()  # 64x48, busy


def _agree(codes: np.ndarray, settings: Settings) -> str:
    ref = render_codes(codes, settings, engine="reference")
    fast = render_codes(codes, settings, engine="fast")
    diff = np.abs(ref.codes.astype(np.int64) - fast.codes.astype(np.int64))
    if ref.encoding.hdr:
        # PQ is so steep at black that a value at the edge of what counts as black
        # (color.PQ_BLACK of white) is 0 or a few dozen codes: both are black to the eye
        light = np.maximum(ref.encoding.decode(ref.codes[..., :3]), ref.encoding.decode(fast.codes[..., :3]))
        diff[..., :3][light < 10 * PQ_BLACK] = 0
    # holding each cell's light moves samples by one code from their nearest, and the two
    # paths' nearest codes may differ by one at a tie: two codes apart at most
    assert diff.max() <= ONE_CODE + settings.holds_cell_light, (fast.route, diff.max())
    if settings.holds_cell_light:  # then both hold each cell's light alike
        from crtfilter.audit import measure_codes

        kept = [measure_codes(r.codes, r.geometry, r.encoding).luminance for r in (ref, fast)]
        assert kept[1] == pytest.approx(kept[0], rel=2e-4)
    assert fast.source_luminance == pytest.approx(ref.source_luminance, rel=1e-9)
    assert fast.plain_multiply_luminance == pytest.approx(ref.plain_multiply_luminance, rel=1e-6)
    # the reference rounds in float32: on uniform cells it "removes" about 1e-8
    assert fast.balance_removed == pytest.approx(ref.balance_removed, rel=1e-4, abs=1e-6)
    # float32 round-off of the upscale, summed over a cell's pixels, in either order
    np.testing.assert_allclose(fast.input_tile_sums, ref.input_tile_sums, rtol=1e-5, atol=1e-6 * np.prod(fast.tile))
    return fast.route


@pytest.mark.parametrize("preset", [p.name for p in all_presets()])
def test_fast_path_equals_reference_on_every_preset(preset, scene):
    settings = next(p for p in all_presets() if p.name == preset).settings
    settings = dataclasses.replace(settings, geometry=dataclasses.replace(settings.geometry, fit="960x720"))
    _agree(scene, settings)


@pytest.mark.parametrize("kernel", sorted(KERNELS))
@pytest.mark.parametrize("phosphor", sorted(PHOSPHORS))
@pytest.mark.parametrize("scale", [3, 4.5])
def test_fast_path_equals_reference_for_every_kernel_mask_and_scale(kernel, phosphor, scale, scene):
    settings = Settings(geometry=GeometrySettings(scale=scale), kernel=kernel,
                        mask=MaskSettings(phosphor=phosphor, triad_pitch=3.0, slot_height=6.0))
    route = _agree(scene, settings)
    if kernel in ("nearest", "sharp") and scale == 3 and phosphor in ("none", "aperture"):
        assert route == "table"  # whole scale, cells inside source pixels
    else:
        assert route in ("table", "fused")


@pytest.mark.parametrize("options", [
    {"depth": 16}, {"dither": "ordered"}, {"dither": "noise"}, {"output_range": "hdr"},
    {"tone": ToneSettings(curve="multiply")}, {"tone": ToneSettings(curve="exponent", softness=0.4)},
    {"tone": ToneSettings(balance_tiles=False)},
])
def test_fast_path_equals_reference_for_output_options(options, scene):
    settings = dataclasses.replace(Settings(geometry=GeometrySettings(scale=4.5)), **options)
    _agree(scene, settings)


def test_fast_path_keeps_alpha_and_colour_conversion(scene):
    from crtfilter.color import DecodeSettings

    alpha = np.linspace(0, 1, scene.shape[1], dtype=np.float32)[None, :].repeat(scene.shape[0], 0)
    for decode in (DecodeSettings(alpha="keep"), DecodeSettings(primaries="ebu", white="9300k")):
        settings = Settings(decode=decode, geometry=GeometrySettings(scale=3))
        ref = render_codes(scene, settings, alpha=alpha, engine="reference")
        fast = render_codes(scene, settings, alpha=alpha)
        assert np.abs(ref.codes.astype(int) - fast.codes.astype(int)).max() <= ONE_CODE


def test_the_default_render_takes_the_table_route():
    with Image.open(SAMPLES / "scene-320x240.png") as im:
        codes = np.asarray(im.convert("RGB"))
    assert render_codes(codes, all_presets()[0].settings.__class__()).route in ("table", "fused")
    from crtfilter.presets import load_preset

    assert render_codes(codes, load_preset().settings, figures=False).route == "table"


def _run_python(code: str, env: dict) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=600)


def test_the_default_preset_renders_without_loading_numba(tmp_path):
    # where every source pixel covers whole mask cells the table route is a NumPy gather:
    # a still with the default preset starts no compiler and loads no compiled code
    code = ("import sys, numpy as np\n"
            "from crtfilter.cli import main\n"
            f"sys.argv = ['crtfilter', 'render', {str(SAMPLES / 'scene-320x240.png')!r}, '-o', "
            f"{str(tmp_path / 'out.png')!r}, '-q']\n"
            "try:\n    main()\nexcept SystemExit as e:\n    assert not e.code, e.code\n"
            "print('numba' in sys.modules)\n")
    done = _run_python(code, dict(os.environ))
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "False"
    assert (tmp_path / "out.png").stat().st_size > 0


def test_numba_cache_moves_to_the_user_cache_when_the_package_is_read_only(tmp_path):
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env.update(CRTFILTER_READONLY_PACKAGE="1", XDG_CACHE_HOME=str(tmp_path / "cache"))
    # a cubic kernel takes the compiled route (the default preset's needs no compiled code)
    code = ("import numpy as np, crtfilter, os\n"
            "from crtfilter.fast import numba_module\n"
            "out = crtfilter.render(np.full((8, 8, 3), 100, np.uint8), scale=3, kernel='cubic')\n"
            "print(os.environ['NUMBA_CACHE_DIR']); print(numba_module() is not None); print(out.shape)\n")
    done = _run_python(code, env)
    assert done.returncode == 0, done.stderr
    folder, has_numba, shape = done.stdout.split("\n")[:3]
    assert folder == str(tmp_path / "cache" / "crtfilter" / "numba")
    assert has_numba == "True" and shape == "(24, 24, 3)"
    assert any((tmp_path / "cache" / "crtfilter" / "numba").rglob("*.nbi")), "numba wrote no cache there"


def test_numba_cache_falls_back_to_a_temporary_folder(tmp_path):
    blocked = tmp_path / "not-a-folder"
    blocked.write_text("a file where the cache folder would go")
    env = {k: v for k, v in os.environ.items() if k != "NUMBA_CACHE_DIR"}
    env.update(CRTFILTER_READONLY_PACKAGE="1", XDG_CACHE_HOME=str(blocked), TMPDIR=str(tmp_path / "tmp"))
    (tmp_path / "tmp").mkdir()
    done = _run_python("from crtfilter.fast import prepare_numba_cache; print(prepare_numba_cache())", env)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().startswith(str(tmp_path / "tmp" / "crtfilter-numba-"))


def test_help_does_not_import_numba_colour_or_matplotlib():
    code = ("import sys\nfrom crtfilter.cli import app\n"
            "try:\n    app(['--help'], prog_name='crtfilter')\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('numba', 'colour', 'matplotlib') if m in sys.modules))")
    done = _run_python(code, dict(os.environ))
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "[]"


def test_outputs_are_byte_identical_whatever_the_number_of_jobs(tmp_path):
    from crtfilter.files import read_render_record

    folder = tmp_path / "in"
    folder.mkdir()
    with Image.open(SAMPLES / "scene-320x240.png") as im:
        base = np.asarray(im.convert("RGB"))[:96, :128]
    for i in range(5):
        Image.fromarray(np.roll(base, (i * 5, i * 11), axis=(0, 1)).copy()).save(folder / f"f{i}.png")
    (folder / "hdr").mkdir()
    Image.fromarray(base).save(folder / "hdr" / "g.png")
    outs = {}
    for jobs in ("1", "2"):
        out = tmp_path / f"out{jobs}"
        done = subprocess.run([sys.executable, "-m", "crtfilter", "render", str(folder), "-o", str(out),
                               "--scale", "4.5", "-p", "slot-medium-within-4k", "--jobs", jobs, "--report",
                               str(tmp_path / f"r{jobs}.json")], capture_output=True, text=True, timeout=600)
        assert done.returncode == 0, done.stderr
        outs[jobs] = {p.relative_to(out): p.read_bytes() for p in sorted(out.rglob("*.png"))}
    assert outs["1"].keys() == outs["2"].keys() and len(outs["1"]) == 6
    for name in outs["1"]:
        assert outs["1"][name] == outs["2"][name], name
    import json

    r1, r2 = (json.loads((tmp_path / f"r{j}.json").read_text()) for j in ("1", "2"))
    assert [r["input"] for r in r1] == [r["input"] for r in r2]  # reports in input order
    assert read_render_record(tmp_path / "out1" / "f0.png")["preset"] == "slot-medium-within-4k"


def _crtfilter(args: list[str], env: dict) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "crtfilter", *args], capture_output=True, text=True, env=env,
                          timeout=900)


def test_compiled_kernels_are_kept_by_the_disk_cache_for_every_route(tmp_path):
    # a closure gets a new cache key in every process, so it compiled on every run;
    # module-level kernels compile once and load from then on
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "cache")}
    first = _crtfilter(["compile"], env)
    assert first.returncode == 0, first.stderr
    assert "compiled" in first.stdout and "already" not in first.stdout
    again = _crtfilter(["compile"], env)
    assert again.returncode == 0 and "compiled already" in again.stdout, again.stdout
    for preset, extra in [("aperture-soft-within-4k", []), ("aperture-hdr-within-4k", []), ("aperture-fine-within-4k", ["--dither", "noise"]),
                          ("aperture-fine-within-4k", [])]:
        done = _crtfilter(["render", str(SAMPLES / "scene-160x144.png"), "-o", str(tmp_path / "o.png"), "--force",
                           "-p", preset, *extra], env)
        assert done.returncode == 0, done.stderr
        assert "compil" not in done.stderr, (preset, done.stderr)


def test_a_batch_in_two_workers_compiles_what_one_worker_does_and_once(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    with Image.open(SAMPLES / "scene-320x240.png") as im:
        base = np.asarray(im.convert("RGB"))[:60, :80]
    for i in range(4):
        Image.fromarray(np.roll(base, i * 3, axis=1).copy()).save(folder / f"f{i}.png")
    caches = {}
    for jobs in ("1", "2"):
        cache = tmp_path / f"cache{jobs}"
        env = {**os.environ, "NUMBA_CACHE_DIR": str(cache)}
        done = _crtfilter(["render", str(folder), "-o", str(tmp_path / f"out{jobs}"), "--scale", "4.5",
                           "--jobs", jobs], env)
        assert done.returncode == 0, done.stderr
        assert done.stderr.count("compiled the fast path") == 1, done.stderr  # the parent, before any worker
        caches[jobs] = sorted(p.name for p in cache.rglob("*.nbi"))
    assert caches["1"] == caches["2"] and caches["1"]


@pytest.mark.parametrize("options", [
    {"dither": "ordered"}, {"dither": "noise"}, {"output_range": "hdr"}, {"depth": 16},
    {"geometry": GeometrySettings(scale=4.5)}, {"kernel": "cubic"}, {"kernel": "lanczos3"}, {"kernel": "bilinear"},
])
def test_every_option_stays_in_a_compiled_route(options, scene):
    settings = dataclasses.replace(Settings(geometry=GeometrySettings(scale=3)), **options)
    assert render_codes(scene, settings).route in ("table", "fused")


def test_colour_conversion_and_kept_alpha_stay_in_a_compiled_route(scene):
    from crtfilter.color import DecodeSettings

    alpha = np.full(scene.shape[:2], 0.5, np.float32)
    for decode in (DecodeSettings(alpha="keep"), DecodeSettings(white="9300k"), DecodeSettings(primaries="ebu")):
        settings = Settings(decode=decode, geometry=GeometrySettings(scale=3))
        assert render_codes(scene, settings, alpha=alpha).route == "fused"


def test_the_fast_encodings_are_within_one_code_of_the_formulas():
    from crtfilter import color
    from crtfilter.fast import _encode_check

    rng = np.random.default_rng(7)
    values = np.concatenate([rng.random(200_000) ** 4, np.geomspace(1e-7, 1.0, 20_000)]).astype(np.float32)
    # IEC 61966-2-1 (sRGB), 8 and 16 bits
    for depth in (8, 16):
        want = color.encode_srgb(values, depth).astype(np.int64)
        got = _encode_check(values, "sdr", depth).astype(np.int64)
        assert np.abs(got - want).max() <= ONE_CODE, depth
    # SMPTE ST 2084 (PQ), 16 bits, at two headrooms
    for peak in (1000.0, 10000.0):
        enc = color.Encoding("hdr", peak, 203.0)
        lin = values * np.float32(enc.headroom)
        want = enc.encode(lin).astype(np.int64)
        got = _encode_check(lin, "hdr", 16, peak=peak).astype(np.int64)
        assert np.abs(got - want).max() <= ONE_CODE, peak


@pytest.mark.parametrize("preset", all_presets(), ids=lambda p: p.name)
def test_rows_rendered_alone_are_the_rows_of_the_whole_render(scene, preset):
    # what the tuning page shows of part of the picture is what the file holds there
    from crtfilter.engine import render_rows

    full = render_codes(scene, preset.settings, figures=False).codes
    h = full.shape[0]
    for first, stop in ((0, 37), (h // 3 + 5, h // 3 + 411), (h - 50, h)):
        part = render_rows(scene, preset.settings, first, stop)
        assert part.shape == full.shape
        assert np.array_equal(part[first:stop], full[first:stop]), (first, stop)


def test_rows_rendered_alone_render_only_their_bands(scene):
    # a fused preset without glow: the rows far from those asked stay black
    from crtfilter.engine import render_rows
    from crtfilter.presets import load_preset

    settings = load_preset("aperture-soft-within-4k").settings
    part = render_rows(scene, settings, 1000, 1100)
    assert part[1000:1100].any()
    assert not part[:500].any() and not part[1600:].any()
