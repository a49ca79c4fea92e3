"""One Euro filter for keypoints drawn as stick figures: steady when still, quick when moving.

Reference: G. Casiez, N. Roussel, D. Vogel, "1€ Filter: A Simple Speed-based Low-pass Filter for
Noisy Input in Interactive Systems", CHI 2012. With sampling period Tₑ (seconds, from frame
timestamps so variable frame rates work):

    α(f_c) = 1 / (1 + τ/Tₑ),  τ = 1 / (2π f_c)
    dx̂ᵢ = α(d_cutoff)·(xᵢ − x̂ᵢ₋₁)/Tₑ + (1 − α(d_cutoff))·dx̂ᵢ₋₁
    f_c  = min_cutoff + beta·|dx̂ᵢ|
    x̂ᵢ  = α(f_c)·xᵢ + (1 − α(f_c))·x̂ᵢ₋₁

The first sample passes through unchanged with derivative 0. Everything is element-wise, so an
array of any shape (e.g. keypoints [17,2]) is filtered as independent signals in one call.
The filter smooths only what is drawn; obscured regions use the raw detection boxes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from redact.errors import InputError


@dataclass(frozen=True)
class OneEuroParams:
    """min_cutoff (Hz): cutoff at zero speed; beta (s/px): how much speed raises the cutoff;
    d_cutoff (Hz): cutoff of the derivative estimate. Casiez et al. 2012 tune min_cutoff, then beta."""

    min_cutoff: float = 1.0
    beta: float = 0.0
    d_cutoff: float = 1.0

    def __post_init__(self) -> None:
        if not (self.min_cutoff > 0 and self.d_cutoff > 0 and self.beta >= 0):
            raise InputError("One Euro filter needs min_cutoff > 0, d_cutoff > 0 and beta >= 0")


@dataclass(frozen=True)
class OneEuroState:
    """Filter state after a sample: time t (s), estimate x [any shape], derivative estimate dx (units/s)."""

    t: float
    x: np.ndarray
    dx: np.ndarray


def smoothing_factor(cutoff: np.ndarray | float, period: float) -> np.ndarray | float:
    """α = 1 / (1 + τ/Tₑ) with τ = 1/(2π·cutoff) (Casiez et al. 2012, eq. for the exponential smoother)."""
    tau = 1.0 / (2.0 * math.pi * np.asarray(cutoff, np.float64))
    return 1.0 / (1.0 + tau / period)


def one_euro_step(params: OneEuroParams, state: OneEuroState | None, x: np.ndarray, t: float) -> OneEuroState:
    """Filter one sample x taken at time t (seconds) and return the new state (its x is the output).

    state None starts the filter. Times must increase strictly; the shape of x must not change.
    """
    x = np.array(x, np.float64)  # a copy: the state never aliases the caller's array
    if state is None:
        return OneEuroState(float(t), x, np.zeros_like(x))
    if x.shape != state.x.shape:
        raise InputError(f"One Euro filter: sample shape {list(x.shape)} differs from {list(state.x.shape)}")
    period = float(t) - state.t
    if not period > 0:
        raise InputError(f"One Euro filter: time must increase (got {t} after {state.t})")
    a_d = smoothing_factor(params.d_cutoff, period)
    dx = a_d * (x - state.x) / period + (1.0 - a_d) * state.dx
    cutoff = params.min_cutoff + params.beta * np.abs(dx)
    a = smoothing_factor(cutoff, period)
    return OneEuroState(float(t), a * x + (1.0 - a) * state.x, dx)


def filter_sequence(params: OneEuroParams, xs: np.ndarray, ts: np.ndarray) -> np.ndarray:
    """Filter a whole sequence xs [T, ...] sampled at times ts [T]; returns [T, ...] float64."""
    xs = np.asarray(xs, np.float64)
    out = np.empty_like(xs)
    state = None
    for i, t in enumerate(np.asarray(ts, np.float64)):
        state = one_euro_step(params, state, xs[i], float(t))
        out[i] = state.x
    return out
