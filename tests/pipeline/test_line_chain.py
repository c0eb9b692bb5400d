"""Tests of slicer.pipeline.line_chain: the processing chain of a build on one placed line
(time zero, dewow, background removal, migration, gain, envelope) as its settings say.

The chain must equal the public single steps of slicer.processing run one after another, so
these tests compare it with them; the steps themselves are checked against their references
in tests/processing/. Sources named beside the checks:
- The envelope is the magnitude of the analytic signal (Taner, Koehler & Sheriff 1979,
  Geophysics 44:1041-1063), checked against ``scipy.signal.hilbert``.
- The order time zero, dewow, background removal, (migration), gain, envelope is common
  practice for GPR slice mapping (dewow before gain, so the gain does not amplify the wow).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.fft
import scipy.signal

import slicer
from slicer.core.errors import SettingsError
from slicer.geometry.survey import load_line
from slicer.pipeline.line_chain import dewow_window, migrate_line, process_line, processing_summary
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


@pytest.fixture(scope="module")
def base(small_survey):
    """Settings of the small survey (time zero 3 ns, 0.1 m/ns) and its line 1, placed."""
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1")
    return settings, load_line(settings.lines[1], settings, sample_interval_ns=0.1)


def _settings(base, **changes):
    return dataclasses.replace(base[0], **changes)


def _single_steps(line, settings, dewow_ns=None, migrated=False):
    """The chain written out with the public single steps."""
    out = correct_time_zero(line, time_zero=settings.time_zero)
    if settings.dewow != "off":
        window = dewow_ns if settings.dewow == "auto" else float(settings.dewow)
        out = dewow(out, window_ns=window)
    if settings.background != "off":
        out = remove_background(out, method=settings.background)
    if migrated:
        out = migrate(out, velocity=settings.resolved_velocity, method=settings.migrate)
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
    ({}, 3.75, ["time zero 3.0 ns", "dewow 3.75 ns", "background removal (median trace)",
                "gain power:1", "envelope (Hilbert)"]),
    ({"time_zero": "auto", "dewow": "off", "background": "off", "gain": "none"}, None,
     ["time zero auto (direct-wave pick per line)", "no gain", "envelope (Hilbert)"]),
    ({"dewow": 2.0, "background": "mean", "migrate": "stolt", "gain": "exp:0.2",
      "level": True}, None,
     ["time zero 3.0 ns", "dewow 2.00 ns", "background removal (mean trace)",
      "stolt migration", "gain exp:0.2", "envelope (Hilbert)", "line levelling"]),
    ({"dewow": "auto"}, None, ["time zero 3.0 ns", "dewow auto",
                               "background removal (median trace)", "gain power:1",
                               "envelope (Hilbert)"]),
])
def test_processing_summary_names_each_step_in_chain_order(base, changes, dewow_ns, expected):
    summary = processing_summary(_settings(base, **changes), dewow_ns)
    assert summary.split("; ") == expected
    assert "\n" not in summary


# --- the chain -------------------------------------------------------------------------------


@pytest.mark.parametrize(("changes", "dewow_ns"), [
    ({"dewow": 1.5, "background": "median"}, None),
    ({"dewow": "off", "background": "mean", "gain": "exp:0.2"}, None),
    ({"dewow": "auto", "gain": "none"}, 3.1),
    ({"dewow": "auto", "background": "off", "gain": "power:2"}, None),
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
    settings = _settings(base, dewow="off", background="off", gain="none")
    got = process_line(base[1], settings)
    # time zero only relabels the time axis: raw 3.0 ns becomes 0
    np.testing.assert_allclose(got["twt"].values, base[1]["twt"].values - 3.0, atol=1e-12)
    x = base[1].values.astype(np.float64)
    n = x.shape[1]
    # scipy.signal.hilbert on the trace zero-padded to the same length as the chain pads it
    nfft = scipy.fft.next_fast_len(2 * n, real=False)
    reference = np.abs(scipy.signal.hilbert(x, N=nfft, axis=-1))[:, :n]
    np.testing.assert_allclose(got.values, reference, rtol=0, atol=1e-5 * reference.max())


def test_chain_with_migration_equals_the_single_steps(base):
    settings = _settings(base, migrate="stolt", dewow=1.5)
    got = process_line(base[1], settings)
    expected = _single_steps(base[1], settings, migrated=True)
    np.testing.assert_allclose(got.values, expected.values, rtol=1e-5,
                               atol=1e-6 * float(np.abs(expected).max()))
    assert "stolt" in got.attrs["history"].lower()


def test_one_velocity_is_migrated_with_the_method_asked(base):
    line = correct_time_zero(base[1], time_zero=3.0)
    for method in ("stolt", "phase-shift"):
        got = migrate_line(line, _settings(base, migrate=method))
        np.testing.assert_array_equal(got.values,
                                      migrate(line, velocity=0.1, method=method).values)


def test_layered_model_needs_phase_shift(base, tmp_path):
    model = tmp_path / "model.toml"
    model.write_text(LAYERED)
    settings = base[0].replace(velocity=None, velocity_model=model, migrate="stolt")
    line = correct_time_zero(base[1], time_zero=3.0)
    with pytest.raises(SettingsError, match="Stolt migration needs one velocity") as info:
        migrate_line(line, settings)
    assert info.value.where == "--migrate"
    layered = settings.resolved_model
    got = migrate_line(line, settings.replace(migrate="phase-shift"))
    expected = migrate(line, velocity=list(layered.velocity), layer_tops=list(layered.top_time),
                       tops="twt", method="phase-shift")
    np.testing.assert_array_equal(got.values, expected.values)
