"""The coupling model of slicer.velocity.coupling against the full-wave survey.

The survey (tests/fullwave/data) is Maxwell's equations on a Yee grid (tests/fullwave/fdtd.py,
verified against analytic physics in tests/fullwave/test_fdtd.py), not slicer's model: a line
source 2 cm above ground of relative permittivity 9, a steel pipe of radius 0.05 m centred
0.40 m deep (truth.json). The envelope peaks of its echo, picked as slicer picks them, drift
early against the straight-ray time of the pipe's centre as the antennas move off the apex;
the model, given the true velocity, depth and antenna height, must follow that drift.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

import slicer
from slicer.geometry.positioning import prepare_survey
from slicer.geometry.survey import load_line, survey_info
from slicer.processing.steps import correct_time_zero
from slicer.velocity.coupling import _model_peaks, _section, _straight
from slicer.velocity.diffraction import _analytic
from slicer.velocity.diffraction_picks import pick_envelope
from slicer.velocity.hyperbola import HyperbolaFit
from slicer.velocity.lag_picks import MIN_SIMILARITY, lag_picks

DATA = Path(__file__).parent / "data"
TRUTH = json.loads((DATA / "truth.json").read_text())
S = TRUTH["antenna_separation"]


def _line(name: str = "FW03"):
    settings = prepare_survey(slicer.load_settings(DATA / "survey.toml"))
    info = survey_info(settings.lines, sample_interval_ns=settings.sample_interval)
    entry = next(e for e in settings.lines if e.file.stem == name)
    line = load_line(entry, settings, sample_interval_ns=info.sample_interval_ns)
    return correct_time_zero(line, time_zero="auto", separation=S)


def test_model_follows_the_full_wave_picks_beyond_the_critical_angle():
    """Relative to the apex, the picks of the steel pipe lead the straight ray by more than
    0.3 ns somewhere within 45 degrees (measured 2026: 0.46 ns at 41-45 degrees), and the
    model's envelope peaks (true v, centre depth and height) follow them to a fifth of that
    (measured: within 0.062 ns, the model's peaks 0.01-0.06 ns later beyond 20 degrees, so
    a fit of corrected picks still reads a little fast)."""
    pipe, v = TRUTH["pipes"][0], TRUTH["velocity"]
    period = 1e3 / TRUTH["centre_frequency"]  # ns
    t_axis, data, distance = _section(_line())
    env = np.abs(_analytic(data, t_axis[1] - t_axis[0], 1.0 / period))
    x0, centre = pipe["x"], pipe["depth_centre"]
    i = int(np.argmin(np.abs(distance - x0)))
    early = 2 * pipe["radius"] / v - 0.4  # the echo is from the top; its peak a little later
    x, t, _ = pick_envelope(env, distance, t_axis, x0=x0,
                            predict=lambda x: _straight(x, x0, centre, v, S / 2) - early,
                            reach=centre * math.tan(math.radians(45)),
                            half_window=0.5 * period)
    drift = t - _straight(x, x0, centre, v, S / 2)
    k = int(np.argmin(np.abs(x - distance[i])))
    apex_t, drift = t[k], drift - drift[k]
    t0 = 2 * math.hypot(centre, S / 2) / v  # the centre's apex time: the model's own target
    truth_fit = HyperbolaFit(v, 0, x0, 0, t0, 0, centre, 0, 0, 0, 0, x.size, separation=S)
    model = _model_peaks(data, t_axis, period, x, apex_t, (distance[i], data[i]), truth_fit,
                         TRUTH["antenna_height"], S / 2)
    assert np.nanmax(np.abs(drift)) > 0.3, drift
    assert np.isfinite(model).all()
    # what the model leaves is under a fifth of the largest drift (measured: 0.062 ns of 0.46)
    assert np.abs(drift - model).max() < 0.2 * np.abs(drift).max(), np.round(drift - model, 3)


def test_lags_corrected_by_the_model_follow_the_round_target():
    """Lags against the apex echo (slicer.velocity.lag_picks), corrected by the model's own
    lags (true v, centre depth and height), lie on the round target's curve: the legs to the
    centre less the radius (Shihab & Al-Nuaimy 2005; geometry), relative to the apex, within
    0.025 ns to 45 degrees from the centre for both pipes (measured 2026: steel 0.014 ns,
    air-filled 0.021 ns; the model's envelope peaks left 0.03-0.06 ns, the test above)."""
    period = 1e3 / TRUTH["centre_frequency"]  # ns
    v, h = TRUTH["velocity"], TRUTH["antenna_height"]
    t_axis, data, distance = _section(_line())
    env = np.abs(_analytic(data, t_axis[1] - t_axis[0], 1.0 / period))
    for pipe in TRUTH["pipes"]:
        x0, centre, r = pipe["x"], pipe["depth_centre"], pipe["radius"]
        i = int(np.argmin(np.abs(distance - x0)))

        def round_curve(x, x0=x0, centre=centre, r=r):
            return _straight(x, x0, centre, v, S / 2) - 2 * r / v

        reach = centre * math.tan(math.radians(45))
        xe, te, _ = pick_envelope(env, distance, t_axis, x0=x0,
                                  predict=lambda x: round_curve(x) + 0.3, reach=reach,
                                  half_window=0.5 * period)
        t_apex = float(te[int(np.argmin(np.abs(xe - distance[i])))])
        lead = t_apex - round_curve(np.array([distance[i]]))[0]
        x, t, _, similar = lag_picks(data, distance, t_axis, reference=data[i], t_ref=t_apex,
                                     period=period, x0=x0, reach=reach, half_window=0.3 * period,
                                     predict=lambda x, lead=lead: round_curve(x) + lead)
        x, t = x[similar >= MIN_SIMILARITY], t[similar >= MIN_SIMILARITY]
        t0 = 2 * math.hypot(centre, S / 2) / v
        truth_fit = HyperbolaFit(v, 0, x0, 0, t0, 0, centre, 0, 0, 0, 0, x.size, separation=S)
        model = _model_peaks(data, t_axis, period, x, t_apex, (distance[i], data[i]),
                             truth_fit, h, S / 2, lags=True)
        assert x.size >= 15 and np.isfinite(model).sum() >= 15, (pipe["name"], x, model)
        residual = t - model - round_curve(x)
        residual -= residual[int(np.argmin(np.abs(x - distance[i])))]
        assert np.nanmax(np.abs(residual)) < 0.025, (pipe["name"], np.round(residual, 3))
