"""Spin rate measured from a marked BB's brightness flicker, and its decay along the flight.

A trajectory fixes the lift force, not the spin rate. A BB marked so that its brightness changes as it
turns flickers at a frequency proportional to its spin; this module turns a brightness series (one value
per detection, uneven times allowed) into a spin rate with an honest uncertainty:

1. the slow trend of the brightness (lighting along the path, apparent size) is removed with a low-order
   polynomial in time;
2. a generalised Lomb–Scargle periodogram (a least-squares sinusoid with a floating mean at each trial
   frequency) finds the flicker; its false-alarm probability says whether the peak is real;
3. a least-squares sinusoid fit around the peak refines the frequency and gives its standard error;
4. the flicker frequency becomes a spin rate through the marking (flicker cycles per turn); when the
   flicker may exceed half the frame rate every alias in a plausible band is listed and one is chosen only
   with a stated prior (the spin implied by the fitted lift under a named lift law, or a second clip at
   another frame rate);
5. the exposure's smoothing of the flicker (a flicker at f integrated over T_e is scaled by
   |sinc(f·T_e)|) is taken out of the reported modulation depth, candidate by candidate.

Sliding windows give the spin along the flight (:func:`spin_vs_time`) and an exponential fit to them, in
time or in distance flown, gives the spin decay (:func:`fit_spin_decay`); a flight too short for windows of
their own is fitted at once by a chirped sinusoid (:func:`fit_spin_decay_coherent`). One refit leaves out
samples more than :data:`OUTLIER_CLIP_SIGMA` robust σ off (a BB cut by the image edge). For one shot,
:func:`measure_shot_spin` does all of it and :func:`shot_spin_to_json` gives ``fit.json``'s record.

The brightness wanted is the BB's own light: the frame minus the background, plus the background the BB
hides (Σ (frame − background) + Σ coverage · background). Frame minus background alone mixes in the wall
texture passing behind the ball, which on the rendered ``lane-spin`` scene moves the rate by 2 % and the
decay time of a short, fast-decaying flight by half (``tests/bench/bench_spin.py``).

The modules, in the order of the steps: :mod:`fitting.spin_periodogram` (periodogram and false-alarm
probability), :mod:`fitting.spin_aliases` (markings, alias candidates and priors),
:mod:`fitting.spin_estimate` (the estimator), :mod:`fitting.spin_windows` (windows and decay fits) and
:mod:`fitting.spin_record` (the per-shot record and ``fit.json``). Every public name is importable from
here.

Everything here is SI: seconds, hertz (flicker cycles per second), rad/s (spin). rpm only at the edges.
Failure to measure is a value (``rate_radps`` None with a ``reason``); bad arrays raise ``ValueError``.

References
----------
The periodogram's and the false-alarm probability's sources (Lomb 1976, Scargle 1982, Zechmeister &
Kürster 2009, Baluev 2008) are cited in full in :mod:`fitting.spin_periodogram`.
"""

from __future__ import annotations

from .spin_aliases import (
    DEFAULT_LIFT_LAW_REL_SIGMA,
    DEFAULT_MARKING,
    MARKINGS,
    PRIOR_MATCH_Z,
    PRIOR_ODDS_MIN,
    Marking,
    SpinPrior,
    alias_frequencies,
    exposure_attenuation,
    marking_named,
    spin_prior_for_fit_shot,
    spin_prior_from_lift,
)
from .spin_estimate import (
    CLIP_MATCH_Z,
    DEFAULT_MAX_FALSE_ALARM,
    DEFAULT_RATE_BAND_RADPS,
    DEFAULT_TREND_DEGREE,
    MIN_CYCLES,
    MIN_POINTS,
    OUTLIER_CLIP_SIGMA,
    SpinEstimate,
    SpinOptions,
    measure_spin,
    resolve_with_second_clip,
)
from .spin_periodogram import DEFAULT_OVERSAMPLE, false_alarm_probability, frequency_grid, lomb_scargle
from .spin_record import (
    ShotSpin,
    add_spin_measured,
    check_spin_measured,
    measure_shot_spin,
    measured_spin_ratio,
    shot_spin_to_json,
)
from .spin_windows import (
    CONTINUITY_FRACTION,
    DECAY_RESOLVED_Z,
    MAX_DECAY_OVER_SERIES,
    MIN_DECAY_WINDOWS,
    SpinDecay,
    SpinSeries,
    fit_spin_decay,
    fit_spin_decay_coherent,
    spin_vs_time,
)

__all__ = [
    "CLIP_MATCH_Z",
    "CONTINUITY_FRACTION",
    "DECAY_RESOLVED_Z",
    "DEFAULT_LIFT_LAW_REL_SIGMA",
    "DEFAULT_MARKING",
    "DEFAULT_MAX_FALSE_ALARM",
    "DEFAULT_OVERSAMPLE",
    "DEFAULT_RATE_BAND_RADPS",
    "DEFAULT_TREND_DEGREE",
    "MARKINGS",
    "MAX_DECAY_OVER_SERIES",
    "MIN_CYCLES",
    "MIN_DECAY_WINDOWS",
    "MIN_POINTS",
    "OUTLIER_CLIP_SIGMA",
    "PRIOR_MATCH_Z",
    "PRIOR_ODDS_MIN",
    "Marking",
    "ShotSpin",
    "SpinDecay",
    "SpinEstimate",
    "SpinOptions",
    "SpinPrior",
    "SpinSeries",
    "add_spin_measured",
    "alias_frequencies",
    "check_spin_measured",
    "exposure_attenuation",
    "false_alarm_probability",
    "fit_spin_decay",
    "fit_spin_decay_coherent",
    "frequency_grid",
    "lomb_scargle",
    "marking_named",
    "measure_shot_spin",
    "measure_spin",
    "measured_spin_ratio",
    "resolve_with_second_clip",
    "shot_spin_to_json",
    "spin_prior_for_fit_shot",
    "spin_prior_from_lift",
    "spin_vs_time",
]
