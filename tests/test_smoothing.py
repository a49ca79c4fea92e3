"""One Euro filter (Casiez, Roussel, Vogel, "1€ Filter", CHI 2012) checked against its equations."""

from __future__ import annotations

import math

import numpy as np
import pytest

from redact.errors import InputError
from redact.vision.smoothing import OneEuroParams, filter_sequence, one_euro_step, smoothing_factor


def test_smoothing_factor_formula():
    # Casiez et al. 2012: α = 1 / (1 + τ/Tₑ), τ = 1/(2π f_c). At f_c = 1 Hz, Tₑ = 0.1 s:
    # τ = 0.159155, α = 1/(1 + 1.59155) = 0.385870 (hand-computed).
    assert smoothing_factor(1.0, 0.1) == pytest.approx(0.3858695, abs=1e-6)


def test_matches_reference_equations_on_hand_computed_sequence():
    # Derived by hand from the equations of Casiez et al. 2012 (min_cutoff 1 Hz, beta 0.1, d_cutoff 1 Hz),
    # samples x = 0, 10, 10, 4 at t = 0, 0.1, 0.2, 0.25 s (the last period is shorter: variable rate).
    # step 2: α_d = 0.385870, dx̂ = 0.385870·(10−0)/0.1 = 38.5870, f_c = 1 + 0.1·38.5870 = 4.85870,
    #         α = 1/(1 + 1/(2π·4.85870·0.1)) = 0.753258, x̂ = 0.753258·10 = 7.53258
    # step 3: dx̂ = 0.385870·(10−7.53258)/0.1 + 0.614130·38.5870 = 33.2185, f_c = 4.32185,
    #         α = 0.730857, x̂ = 0.730857·10 + 0.269143·7.53258 = 9.33591
    # step 4: Tₑ = 0.05, α_d = 0.239057, dx̂ = 0.239057·(4−9.33591)/0.05 + 0.760943·33.2185 = −0.234405,
    #         f_c = 1.023440, α = 0.243297, x̂ = 0.243297·4 + 0.756703·9.33591 = 8.03770
    p = OneEuroParams(min_cutoff=1.0, beta=0.1, d_cutoff=1.0)
    got = filter_sequence(p, np.array([0.0, 10.0, 10.0, 4.0]), np.array([0.0, 0.1, 0.2, 0.25]))
    np.testing.assert_allclose(got, [0.0, 7.53258, 9.33591, 8.03770], atol=5e-5)


def test_matches_scalar_reference_elementwise():
    # The vectorised filter equals the scalar equations applied to each element independently.
    def scalar(xs, ts, mc, beta, dc):
        def alpha(fc, te):
            return 1.0 / (1.0 + 1.0 / (2 * math.pi * fc) / te)
        xh, dxh, out = xs[0], 0.0, [xs[0]]
        for i in range(1, len(xs)):
            te = ts[i] - ts[i - 1]
            ad = alpha(dc, te)
            dxh = ad * (xs[i] - xh) / te + (1 - ad) * dxh
            a = alpha(mc + beta * abs(dxh), te)
            xh = a * xs[i] + (1 - a) * xh
            out.append(xh)
        return np.array(out)

    rng = np.random.default_rng(3)
    ts = np.cumsum(rng.uniform(0.02, 0.06, 40))
    xs = rng.normal(0, 5, (40, 17, 2)).cumsum(axis=0)
    got = filter_sequence(OneEuroParams(0.8, 0.03, 1.2), xs, ts)
    for k in (0, 5, 16):
        for d in (0, 1):
            np.testing.assert_allclose(got[:, k, d], scalar(xs[:, k, d], ts, 0.8, 0.03, 1.2), rtol=1e-12)


def test_constant_signal_stays_constant():
    xs = np.full((50, 17, 2), 123.25)
    got = filter_sequence(OneEuroParams(1.0, 0.5, 1.0), xs, np.arange(50) / 30.0)
    np.testing.assert_allclose(got, 123.25, rtol=0, atol=1e-9)


def test_step_converges_monotonically():
    ts = np.arange(120) / 30.0
    xs = np.where(np.arange(120) < 10, 0.0, 100.0)
    got = filter_sequence(OneEuroParams(1.0, 0.0, 1.0), xs, ts)
    after = got[10:]
    assert np.all(np.diff(after) >= 0) and after[0] < 100.0  # a low-pass filter: no jump, no overshoot
    assert abs(after[-1] - 100.0) < 0.01  # converged within ~3.6 s at a 1 Hz cutoff


def test_beta_speeds_up_response():
    ts = np.arange(30) / 30.0
    xs = np.where(np.arange(30) < 5, 0.0, 100.0)
    slow = filter_sequence(OneEuroParams(1.0, 0.0, 1.0), xs, ts)
    fast = filter_sequence(OneEuroParams(1.0, 0.05, 1.0), xs, ts)
    assert fast[8] > slow[8] + 10.0  # speed raises the cutoff, so the lag shrinks (the paper's point)


def test_noise_variance_drops_on_static_signal():
    rng = np.random.default_rng(11)
    xs = 50.0 + rng.normal(0, 2.0, (600, 17, 2))
    got = filter_sequence(OneEuroParams(1.0, 0.0, 1.0), xs, np.arange(600) / 30.0)
    raw_var = xs[100:].var()
    out_var = got[100:].var()
    # With beta=0 it is an exponential smoother with α ≈ 0.173 at 30 Hz; white-noise variance is
    # scaled by α/(2−α) ≈ 0.095, so a factor 5 is a safe floor.
    assert out_var < raw_var / 5.0
    assert abs(got[100:].mean() - 50.0) < 0.2


def test_time_must_increase_and_shape_must_match():
    p = OneEuroParams()
    s = one_euro_step(p, None, np.zeros(3), 1.0)
    with pytest.raises(InputError, match="time must increase"):
        one_euro_step(p, s, np.zeros(3), 1.0)
    with pytest.raises(InputError, match="shape"):
        one_euro_step(p, s, np.zeros(4), 2.0)
    with pytest.raises(InputError):
        OneEuroParams(min_cutoff=0.0)


def test_state_does_not_alias_input():
    x = np.ones(3)
    s = one_euro_step(OneEuroParams(), None, x, 0.0)
    x[:] = 7.0
    assert np.all(s.x == 1.0)
