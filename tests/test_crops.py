"""Window planning (redact.vision.crops): geometric promises, checked over random scenes (hypothesis).

These are properties of the construction (every person inside a window at the target size;
a sweep leaves no person-sized gap), not values from a published source.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from redact.errors import InputError
from redact.vision.crops import STRIDE, CropSettings, person_windows, sweep_windows

S = CropSettings()


def _inside(box, w) -> bool:
    x1, y1, x2, y2 = box
    return w.x0 - 1e-6 <= x1 and w.y0 - 1e-6 <= y1 and x2 <= w.x1 + 1e-6 and y2 <= w.y1 + 1e-6


people = st.lists(st.tuples(st.floats(0, 1200), st.floats(0, 650), st.floats(20, 300), st.floats(0.25, 0.8)),
                  min_size=1, max_size=12)


@settings(max_examples=150, deadline=None)
@given(people)
def test_every_person_lies_inside_a_window_big_enough(boxes):
    # boxes come clipped to the frame, as the detector reports them
    arr = np.array([(x, y, min(1280.0, x + h * r), min(720.0, y + h)) for x, y, h, r in boxes])
    arr = arr[(arr[:, 2] > arr[:, 0] + 1) & (arr[:, 3] > arr[:, 1] + 1)]
    if not len(arr):
        return
    wins = person_windows(arr, 1280, 720, S)
    assert wins and len(wins) <= len(arr)
    for w in wins:
        assert w.in_w % STRIDE == 0 and w.in_h % STRIDE == 0
        assert w.scale <= S.max_upscale + 1e-9
        assert max(w.in_w, w.in_h) <= max(S.max_side, 2 * STRIDE) or len(arr) == 1
    for box in arr:
        h = box[3] - box[1]
        ok = [w for w in wins if _inside(box, w)]
        assert ok, box
        # the person reaches the target height in at least one window (or the upscale cap)
        assert max(w.scale for w in ok) * max(h, S.min_person_height) >= min(
            S.target_height, S.max_upscale * max(h, S.min_person_height)) - 1e-6


def test_one_small_person_is_enlarged_to_the_target_height():
    (w,) = person_windows(np.array([[600.0, 300.0, 624.0, 360.0]]), 1280, 720, S)
    assert w.scale == pytest.approx(S.target_height / 60.0)
    assert 600 >= w.x0 and 624 <= w.x1 and 300 >= w.y0 and 360 <= w.y1


def test_neighbours_share_a_window_and_cost_no_more():
    a = np.array([[600.0, 300.0, 624.0, 360.0], [630.0, 302.0, 652.0, 362.0]])
    together = person_windows(a, 1280, 720, S)
    apart = person_windows(a[:1], 1280, 720, S) + person_windows(a[1:], 1280, 720, S)
    assert len(together) == 1
    assert together[0].pixels <= sum(w.pixels for w in apart)


def test_windows_are_moved_inside_the_frame_when_they_fit():
    (w,) = person_windows(np.array([[0.0, 0.0, 20.0, 50.0]]), 1280, 720, S)
    assert w.x0 >= -STRIDE / w.scale and w.y0 >= -STRIDE / w.scale  # only stride rounding reaches out


@settings(max_examples=100, deadline=None)
@given(st.integers(160, 1920), st.integers(120, 1080), st.data())
def test_sweep_leaves_no_gap_a_person_could_hide_in(fw, fh, data):
    tiles = sweep_windows(fw, fh, S)
    for t in tiles:
        assert t.scale == pytest.approx(S.scale_for(S.min_person_height))
    tallest = 2 * S.min_person_height  # the tiles are meant for people up to this tall
    h = data.draw(st.floats(S.min_person_height, min(tallest, fh)))
    w = data.draw(st.floats(h * 0.25, min(h, fw)))
    x = data.draw(st.floats(0, fw - w))
    y = data.draw(st.floats(0, fh - h))
    assert any(_inside((x, y, x + w, y + h), t) for t in tiles)


@pytest.mark.parametrize("kw", [dict(min_person_height=4), dict(target_height=700), dict(max_upscale=0.5),
                                dict(context=5.0), dict(max_side=100), dict(sweep_overlap=3.0)])
def test_settings_are_checked(kw):
    with pytest.raises(InputError):
        CropSettings(**kw)
