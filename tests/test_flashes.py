"""The flash check against the WCAG 2.2 SC 2.3.1 definitions (general and red flash thresholds).

Thresholds as the criterion states them (from memory): a general flash is a pair
of opposing changes of 10 % of the maximum relative luminance with the darker
image below 0.80; a red flash involves saturated red, R / (R + G + B) >= 0.8,
with a change in max(0, (R - G - B) x 320) above 20; more than three flashes in
any one second fail when the area is above 25 % of a 10-degree field.
"""

from __future__ import annotations

import numpy as np
import pytest

from crtfilter.flashes import FlashCheck, caution_line

FPS = 30


def _clip(seconds: float, frame, fps: int = FPS):
    check = FlashCheck(fps)
    for i in range(int(seconds * fps)):
        check.add(frame(i, i / fps))
    return check


def _field(value, shape=(48, 64)):
    return np.broadcast_to(np.asarray(value, np.float32), (*shape, 3)).copy()


def _toggling(hz: float, on, off, start: float = 0.0, stop: float = 1e9, area=None):
    def frame(i, t):
        lit = start <= t < stop and int(t * 2 * hz) % 2 == 0
        picture = _field(off)
        if lit:
            if area is None:
                picture[...] = on
            else:
                picture[area] = on
        return picture
    return frame


def test_a_static_clip_has_no_flashes():
    check = _clip(4, lambda i, t: _field(0.5))
    assert check.failing_seconds() == [] and caution_line([]) is None


def test_full_field_flashing_five_times_a_second_fails_in_the_seconds_it_runs():
    # black and white at 5 Hz between 2 s and 4 s of a 6 s clip: five flashes a second
    check = _clip(6, _toggling(5, 1.0, 0.0, start=2.0, stop=4.0))
    spans = check.failing_seconds()
    assert len(spans) == 1
    start, end = spans[0]
    assert 1.95 <= start <= 2.05 and 3.85 <= end <= 4.05, spans
    assert check.general and not check.red
    line = caution_line(spans)
    assert "2.0" in line and "seizures" in line


@pytest.mark.parametrize("hz", [1.0, 1.5])
def test_three_flashes_a_second_or_fewer_pass(hz):
    assert _clip(4, _toggling(hz, 1.0, 0.0)).failing_seconds() == []


def test_changes_below_a_tenth_of_white_are_no_flash():
    assert _clip(3, _toggling(10, 0.55, 0.47)).failing_seconds() == []


def test_changes_whose_darker_side_is_above_0_8_are_no_general_flash():
    assert _clip(3, _toggling(10, 1.0, 0.85)).failing_seconds() == []


def test_a_small_flashing_area_passes_and_a_large_one_fails():
    small = (slice(0, 6), slice(0, 8))     # 1/64 of the frame: well under 25 % of a third by a third
    large = (slice(0, 24), slice(0, 32))   # a quarter of the frame: a whole 10-degree field
    assert _clip(3, _toggling(8, 1.0, 0.0, area=small)).failing_seconds() == []
    assert _clip(3, _toggling(8, 1.0, 0.0, area=large)).failing_seconds() != []


def test_saturated_red_flashing_fails_as_a_red_flash_below_the_general_threshold():
    # R 0.4: luminance 0.085, under the general 0.1; (R - G - B) x 320 = 128, over 20
    check = _clip(3, _toggling(8, (0.4, 0.0, 0.0), (0.0, 0.0, 0.0)))
    assert check.red and not check.general and check.failing_seconds() != []
    # the same change in a grey that is not saturated red is neither
    assert _clip(3, _toggling(8, (0.1, 0.1, 0.1), (0.05, 0.05, 0.05))).failing_seconds() == []


def test_the_one_second_window_follows_the_frame_rate():
    # ten transitions spread over two seconds at 60 fps: five a second, three flashes
    # or fewer in any one second
    assert _clip(4, _toggling(1.25, 1.0, 0.0), fps=60).failing_seconds() == []
    assert _clip(4, _toggling(5, 1.0, 0.0), fps=60).failing_seconds() != []
