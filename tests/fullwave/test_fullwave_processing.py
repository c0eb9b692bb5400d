"""Signed slices, antenna separation and background removal on the full-wave survey.

The survey (tests/fullwave/data, made by tests/fullwave/fdtd.py: Maxwell's equations on a Yee
grid, not slicer's model) holds a steel pipe (reflection coefficient -1, a perfect conductor)
and an air-filled pipe in ground of relative permittivity 9 (top reflection
``(3 - 1) / (3 + 1) = +0.5``, Fresnel at normal incidence), with transmitter and receiver
0.14 m apart (truth.json).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from slicer.core.conventions import C_M_PER_NS
from slicer.pipeline.cube_build import build_cube
from slicer.pipeline.settings import load_settings

DATA = Path(__file__).parent / "data"
TRUTH = json.loads((DATA / "truth.json").read_text())
QUARTER = TRUTH["quarter_wavelength"]


def _cube(**options):
    options = {"depths": "0.2:0.8:0.02", **options}
    settings = load_settings(DATA / "survey.toml", velocity=TRUTH["velocity"], cell=0.05,
                             **options)
    return build_cube(settings, progress=False).cube


def _profile(**options):
    """The cube averaged across the (identical) lines: (depth, x, values)."""
    cube = _cube(**options)
    return cube["depth"].values, cube["x"].values, cube.mean("y").values


def _at_pipe(depth, x, values, pipe, *, strongest="abs"):
    col = values[:, int(np.argmin(np.abs(x - pipe["x"])))]
    usable = depth < TRUTH["interface_depth"] - QUARTER
    score = np.abs(col) if strongest == "abs" else col
    k = int(np.nanargmax(np.where(usable, score, -np.inf)))
    return k, col


@pytest.mark.parametrize("migrate", ["auto", "off"])
def test_signed_slices_tell_the_steel_pipe_from_the_air_filled_one(migrate):
    depth, x, values = _profile(attribute="signed", migrate=migrate)
    signs = {}
    for pipe in TRUTH["pipes"]:
        k, col = _at_pipe(depth, x, values, pipe)
        assert abs(depth[k] - pipe["depth_top"]) < QUARTER  # the pipe's own event
        signs[pipe["kind"]] = np.sign(col[k])
    # measured: steel -1166 / -631, air-filled +656 / +311 (migrated / not)
    assert signs == {"conductor": -1.0, "air": 1.0}


def test_signed_values_are_the_envelope_values_with_a_sign():
    # on the trace x slice table; gridding then blends neighbours of either sign
    from slicer.pipeline.line_tasks import reduce_survey

    def table(**options):
        settings = load_settings(DATA / "survey.toml", velocity=TRUTH["velocity"],
                                 depths="0.2:0.8:0.02", migrate="off", **options)
        return reduce_survey(settings, progress=False).table.values

    signed, plain = table(attribute="signed"), table()
    np.testing.assert_allclose(np.abs(signed), plain, rtol=1e-6)
    assert (signed < 0).any() and (signed > 0).any()
    assert _cube(attribute="signed", migrate="off").name == "signed_envelope"


def test_antenna_separation_moves_time_zero_by_its_air_time_and_depths_stay_true():
    from slicer.geometry.survey import load_line
    from slicer.processing.steps import correct_time_zero
    settings = load_settings(DATA / "survey.toml", velocity=TRUTH["velocity"])
    line = load_line(settings.lines[0], settings, sample_interval_ns=TRUTH["sample_interval"])
    s = TRUTH["antenna_separation"]
    together = correct_time_zero(line).attrs["time_zero_ns"]
    apart = correct_time_zero(line, separation=s).attrs["time_zero_ns"]
    assert together - apart == pytest.approx(s / C_M_PER_NS, abs=1e-9)
    # the picked direct-wave peak minus s / c lies within a tenth of a period of the
    # emission (measured 0.075 ns before it; without the separation, 0.39 ns after)
    assert abs(apart - TRUTH["emission_time"]) < 0.1 * 1e3 / TRUTH["centre_frequency"]
    assert together - TRUTH["emission_time"] > 0.3
    depth, x, values = _profile(antenna_separation=s)
    for pipe in TRUTH["pipes"]:  # measured +0.029 m (steel), +0.039 m (air-filled)
        k, col = _at_pipe(depth, x, values, pipe, strongest="max")
        assert abs(depth[k] - pipe["depth_top"]) < QUARTER


def _layer_stripes(background):
    """Slice contrast (value less the slice's median across x) at the deeper layer's depth
    under each pipe, over the weaker pipe's own contrast at its top: the shadow a removed
    layer leaves under a pipe reads as a stripe there."""
    depth, x, values = _profile(background=background, depths=None)
    contrast = values - np.nanmedian(values, axis=1, keepdims=True)
    at_layer = np.abs(depth - TRUTH["interface_depth"]) <= QUARTER
    own, under = [], []
    for pipe in TRUTH["pipes"]:
        col = contrast[:, int(np.argmin(np.abs(x - pipe["x"])))]
        own.append(np.nanmax(col[np.abs(depth - pipe["depth_top"]) <= QUARTER]))
        under.append(np.nanmax(col[at_layer]))
    return np.array(under) / min(own)


def test_the_default_background_leaves_no_stripe_brighter_than_half_the_weaker_pipe():
    # issue 13's measure; measured 0.34 and 0.33 (scaled), 0.64 and 0.68 (plain median: the
    # check can fail), about 0 with the layer kept (median:0-12)
    assert (_layer_stripes("scaled") < 0.5).all()
    assert (_layer_stripes("median") > 0.5).all()
    assert (np.abs(_layer_stripes("median:0-12")) < 0.1).all()
