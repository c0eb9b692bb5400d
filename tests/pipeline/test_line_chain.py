"""Tests of slicer.pipeline.line_chain: the processing chain of a build on one placed line
(time zero, dewow, background removal, migration, gain, envelope) as its settings say.

The chain must equal the public single steps of slicer.processing run one after another, so
these tests compare it with them; the steps themselves are checked against their references
in tests/processing/. Sources named beside the checks:
- The envelope is the magnitude of the analytic signal (Taner, Koehler & Sheriff 1979,
  Geophysics 44:1041-1063), checked against ``scipy.signal.hilbert``.
- The order time zero, dewow, background removal, (migration), gain, envelope is common
  practice for GPR slice mapping (dewow before gain, so the gain does not amplify the wow).
- Which migration ``migrate = "auto"`` runs follows what each method assumes: Stolt (1978,
  Geophysics 43:23-48) one constant velocity, phase shift (Gazdag 1978, Geophysics
  43:1342-1351) velocities that change with depth only; neither handles lateral change.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest
import scipy.fft
import scipy.signal

import slicer
from slicer.core.errors import SettingsError, SlicerWarning
from slicer.geometry.survey import load_line
from slicer.pipeline.line_chain import (
    dewow_window,
    migrate_line,
    migration_method,
    process_line,
    processing_summary,
)
from slicer.processing.migration import migrate
from slicer.processing.steps import (
    apply_gain,
    correct_time_zero,
    dewow,
    envelope,
    remove_background,
)

LAYERED = ('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\nvelocity_std = 0.0\n'
           '[[layer]]\ntop_depth = 1.0\nvelocity = 0.08\nvelocity_std = 0.0\n')
ONE_SPEED = LAYERED.replace("0.08", "0.1")  # two layers of one velocity
LATERAL = ('kind = "lateral"\nlength_scale = 2.0\n[[point]]\nx = 512000.0\ny = 4650000.0\n'
           'velocity = 0.1\nvelocity_std = 0\n[[point]]\nx = 512004.0\ny = 4650002.0\n'
           'velocity = 0.12\nvelocity_std = 0\n')


@pytest.fixture(scope="module")
def base(small_survey):
    """Settings of the small survey (time zero 3 ns, 0.1 m/ns) and its line 1, placed."""
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1")
    return settings, load_line(settings.lines[1], settings, sample_interval_ns=0.1)


def _settings(base, **changes):
    return dataclasses.replace(base[0], **changes)


def _model(tmp_path, text):
    path = tmp_path / "model.toml"
    path.write_text(text)
    return path


def _single_steps(line, settings, dewow_ns=None, migrated=None, **migration):
    """The chain written out with the public single steps; ``migrated`` names the method."""
    out = correct_time_zero(line, time_zero=settings.time_zero)
    if settings.dewow != "off":
        window = dewow_ns if settings.dewow == "auto" else float(settings.dewow)
        out = dewow(out, window_ns=window)
    if settings.background != "off":
        out = remove_background(out, method=settings.background)
    if migrated:
        out = migrate(out, method=migrated, **(migration or
                                              {"velocity": settings.resolved_velocity}))
    if settings.gain_curve is not None:
        out = apply_gain(out, kind=settings.gain_curve[0], value=settings.gain_curve[1])
    return envelope(out)


# --- dewow window and summary ----------------------------------------------------------------


@pytest.mark.parametrize(("dewow_setting", "survey_ns", "expected"), [
    ("off", 2.5, "off"),
    (2.2, None, 2.2),
    (2.2, 9.9, 2.2),  # a window given in the settings wins over the survey's
    ("auto", 3.75, 3.75),
    ("auto", None, None),  # None: dewow's own default (1.5 dominant periods of the line)
])
def test_dewow_window_follows_the_settings(base, dewow_setting, survey_ns, expected):
    got = dewow_window(_settings(base, dewow=dewow_setting), survey_ns)
    assert got == expected and type(got) is type(expected)


@pytest.mark.parametrize(("changes", "dewow_ns", "expected"), [
    ({}, 3.75, ["time zero 3.0 ns", "dewow 3.75 ns",
                "background removal (median trace fitted per trace)", "stolt migration",
                "gain power:1", "envelope (Hilbert)"]),
    ({"time_zero": "auto", "dewow": "off", "background": "off", "gain": "none",
      "migrate": "off"}, None,
     ["time zero auto (direct-wave pick per line)", "no gain", "envelope (Hilbert)"]),
    ({"dewow": 2.0, "background": "mean", "migrate": "stolt", "gain": "exp:0.2",
      "level": True}, None,
     ["time zero 3.0 ns", "dewow 2.00 ns", "background removal (mean trace)",
      "stolt migration", "gain exp:0.2", "envelope (Hilbert)", "line levelling"]),
    ({"dewow": "auto", "depths": None, "times": "0:40:5"}, None,
     ["time zero 3.0 ns", "dewow auto", "background removal (median trace fitted per trace)",
      "gain power:1", "envelope (Hilbert)"]),
])
def test_processing_summary_names_each_step_in_chain_order(base, changes, dewow_ns, expected):
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # nothing to say about these chains
        summary = processing_summary(_settings(base, **changes), dewow_ns)
    assert summary.split("; ") == expected
    assert "\n" not in summary


# --- the chain -------------------------------------------------------------------------------


@pytest.mark.parametrize(("changes", "dewow_ns"), [
    ({"dewow": 1.5, "background": "median", "migrate": "off"}, None),
    ({"dewow": "off", "background": "mean", "gain": "exp:0.2", "migrate": "off"}, None),
    ({"dewow": "auto", "gain": "none", "migrate": "off"}, 3.1),
    ({"dewow": "auto", "background": "off", "gain": "power:2", "migrate": "off"}, None),
])
def test_chain_equals_the_single_steps(base, changes, dewow_ns):
    settings = _settings(base, **changes)
    got = process_line(base[1], settings, dewow_ns=dewow_ns)
    expected = _single_steps(base[1], settings, dewow_ns)
    assert got.dims == expected.dims and got.name == "envelope"
    np.testing.assert_array_equal(got["twt"].values, expected["twt"].values)
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-5,
                               atol=1e-6 * float(np.abs(expected).max()))
    assert got.attrs["history"] == expected.attrs["history"]
    np.testing.assert_array_equal(got["x"].values, base[1]["x"].values)


def test_chain_with_nothing_but_time_zero_is_the_hilbert_envelope(base):
    settings = _settings(base, dewow="off", background="off", gain="none", migrate="off")
    got = process_line(base[1], settings)
    # time zero only relabels the time axis: raw 3.0 ns becomes 0
    np.testing.assert_allclose(got["twt"].values, base[1]["twt"].values - 3.0, atol=1e-12)
    x = base[1].values.astype(np.float64)
    n = x.shape[1]
    # scipy.signal.hilbert on the trace zero-padded to the same length as the chain pads it
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    reference = np.abs(scipy.signal.hilbert(x, N=nfft, axis=-1))[:, :n]
    np.testing.assert_allclose(got.values, reference, rtol=0, atol=1e-5 * reference.max())


@pytest.mark.parametrize("migrate_setting", ["stolt", "auto"])
def test_chain_with_migration_equals_the_single_steps(base, migrate_setting):
    # "auto" with one velocity and depth slices is Stolt
    settings = _settings(base, migrate=migrate_setting, dewow=1.5)
    got = process_line(base[1], settings)
    expected = _single_steps(base[1], settings, migrated="stolt")
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-5,
                               atol=1e-6 * float(np.abs(expected).max()))
    assert got.attrs["history"] == expected.attrs["history"]
    assert "Stolt migration 0.1 m/ns" in got.attrs["history"]


def test_layered_model_is_migrated_by_phase_shift_in_the_chain(base, tmp_path):
    settings = base[0].replace(velocity=None, velocity_model=_model(tmp_path, LAYERED),
                               dewow=1.5)
    assert settings.migrate == "auto"  # the default
    layered = settings.resolved_model
    got = process_line(base[1], settings)
    expected = _single_steps(base[1], settings, migrated="phase-shift",
                             velocity=list(layered.velocity), layer_tops=list(layered.top_time))
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-5,
                               atol=1e-6 * float(np.abs(expected).max()))
    assert "phase-shift migration 0.08-0.1 m/ns (layered)" in got.attrs["history"]


@pytest.mark.parametrize(("model", "changes", "expected"), [
    (None, {}, "stolt"),  # one velocity, depth slices
    (None, {"migrate": "off"}, "off"),
    (None, {"migrate": "phase-shift"}, "phase-shift"),  # asked for by name
    (None, {"depths": None, "times": "0:40:5"}, "off"),  # time slices
    (None, {"depths": None, "times": "0:40:5", "migrate": "stolt"}, "stolt"),
    (None, {"depths": None, "times": "0:40:5", "velocity": None}, "off"),  # no velocity
    (LAYERED, {}, "phase-shift"),
    (ONE_SPEED, {}, "stolt"),  # layers of one velocity are one velocity
])
def test_auto_migrates_depth_slices_by_the_velocity_model(base, tmp_path, model, changes,
                                                          expected):
    if model is not None:
        changes = {"velocity": None, "velocity_model": _model(tmp_path, model), **changes}
    settings = base[0].replace(**changes)
    assert migration_method(settings) == (expected, None)


def test_auto_does_not_migrate_a_lateral_model_and_says_why_once(base, tmp_path):
    settings = base[0].replace(velocity=None, velocity_model=_model(tmp_path, LATERAL))
    method, why = migration_method(settings)
    assert method == "off" and "lateral" in why and "\n" not in why
    with pytest.warns(SlicerWarning, match="no 2-D migration here handles lateral") as caught:
        summary = processing_summary(settings)
    assert len(caught) == 1 and "migration" not in summary
    line = correct_time_zero(base[1], time_zero=3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the lines themselves say nothing
        got = process_line(base[1], settings, dewow_ns=2.0)
    assert "migration" not in got.attrs["history"]
    assert got.sizes == line.sizes
    # asked for by name, a lateral model is migrated with its median velocity
    stolt = migrate_line(line, settings.replace(migrate="stolt"))
    np.testing.assert_array_equal(stolt.values, migrate(line, velocity=0.11).values)


def test_one_velocity_is_migrated_with_the_method_asked(base):
    line = correct_time_zero(base[1], time_zero=3.0)
    for method in ("stolt", "phase-shift"):
        got = migrate_line(line, _settings(base, migrate=method))
        np.testing.assert_array_equal(got.values,
                                      migrate(line, velocity=0.1, method=method).values)


def test_layered_model_needs_phase_shift(base, tmp_path):
    settings = base[0].replace(velocity=None, velocity_model=_model(tmp_path, LAYERED),
                               migrate="stolt")
    line = correct_time_zero(base[1], time_zero=3.0)
    with pytest.raises(SettingsError, match="Stolt migration needs one velocity") as info:
        migrate_line(line, settings)
    assert info.value.where == "--migrate"
    layered = settings.resolved_model
    got = migrate_line(line, settings.replace(migrate="phase-shift"))
    expected = migrate(line, velocity=list(layered.velocity), layer_tops=list(layered.top_time),
                       tops="twt", method="phase-shift")
    np.testing.assert_array_equal(got.values, expected.values)
