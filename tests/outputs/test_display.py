"""Tests of slicer.outputs.display: the display settings and their command-line text forms.

References: matplotlib's colour map registry (``matplotlib.colormaps``) for the names,
difflib (the standard library) for the suggested names, Python's ``float`` for the numbers
of ``LOW:HIGH`` and numpy.nanpercentile for the colour limits.
"""

from __future__ import annotations

import difflib
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib import colormaps
from matplotlib.colors import to_rgba

from slicer.core.errors import SettingsError
from slicer.outputs.display import (
    DEFAULT_CLIP,
    NODATA_COLOUR,
    Display,
    colormap_names,
    parse_clip,
    parse_display,
)

percent = st.floats(0, 100, allow_nan=False)


def test_defaults_are_perceptually_uniform_and_diverging_when_signed():
    display = parse_display()
    assert display == Display() and display.clip == DEFAULT_CLIP == (2.0, 98.0)
    assert display.stretch == "shared" and not display.per_slice
    # viridis and PuOr_r are matplotlib's own maps: compare the colours, not the names.
    ramp = np.linspace(0, 1, 7)
    np.testing.assert_allclose(display.colours()(ramp), colormaps["viridis"](ramp))
    np.testing.assert_allclose(display.colours(signed=True)(ramp), colormaps["PuOr_r"](ramp))
    assert display.colours()(np.nan) == pytest.approx(to_rgba(NODATA_COLOUR))


@pytest.mark.parametrize("name", ["gray", "greyscale", "grayscale", "Greys", "magma", "cividis"])
def test_any_matplotlib_name_and_grey_spellings(name):
    display = parse_display(colormap=name)
    rgba = display.colours()(np.linspace(0, 1, 11))
    if "gr" in name.lower():  # grey ramps: red == green == blue
        np.testing.assert_allclose(rgba[:, 0], rgba[:, 1])
        np.testing.assert_allclose(rgba[:, 1], rgba[:, 2])
    else:
        np.testing.assert_allclose(rgba, colormaps[name](np.linspace(0, 1, 11)))
    assert set(colormaps) <= set(colormap_names())


def test_a_misspelt_colour_map_names_the_close_ones():
    with pytest.raises(SettingsError) as info:
        parse_display(colormap="virdis")
    assert info.value.where == "--colormap"
    # Reference: difflib's own suggestions among matplotlib's names.
    close = difflib.get_close_matches("virdis", sorted([*colormaps, "greyscale", "grayscale"]),
                                      n=3, cutoff=0.6)
    assert "viridis" in close
    assert all(name in info.value.message for name in close)
    assert "\n" not in str(info.value)
    with pytest.raises(SettingsError, match="any matplotlib colour map") as info:
        parse_display(colormap="zzzzzzzz")
    assert info.value.where == "--colormap"


@pytest.mark.parametrize("text, stretch", [("shared", "shared"), ("per-slice", "per-slice"),
                                           (" Per-Slice ", "per-slice")])
def test_stretch_words(text, stretch):
    assert parse_display(stretch=text).stretch == stretch
    assert parse_display(stretch=text).per_slice == (stretch == "per-slice")


@pytest.mark.parametrize("text", ["both", "per slice", "", "local"])
def test_unknown_stretch_is_refused_in_one_line(text):
    with pytest.raises(SettingsError, match="shared or per-slice") as info:
        parse_display(stretch=text)
    assert info.value.where == "--stretch" and "\n" not in str(info.value)


@settings(max_examples=200, deadline=None)
@given(low=percent, high=percent)
def test_clip_text_reads_two_ordered_percentiles(low, high):
    text = f"{low!r}:{high!r}"
    if low < high:
        # Reference: Python's float() of each side of the colon.
        assert parse_clip(text) == (float(repr(low)), float(repr(high)))
        assert parse_display(clip=text).clip == (low, high)
    else:
        with pytest.raises(SettingsError, match="0 <= low < high <= 100") as info:
            parse_display(clip=text)
        assert info.value.where == "--clip"


@settings(max_examples=200, deadline=None)
@given(text=st.text(alphabet=st.sampled_from("0123456789.:-+eE naif%,"), max_size=12))
def test_any_clip_text_is_read_or_refused_with_a_settings_error(text):
    try:
        low, high = parse_clip(text)
    except SettingsError as error:
        assert error.where == "--clip" and "\n" not in str(error)
        return
    # Accepted only as two numbers around one colon, in order, within 0-100.
    left, right = text.split(":")
    assert (low, high) == (float(left), float(right))
    assert 0 <= low < high <= 100


@pytest.mark.parametrize("text", ["2-98", "2:98:99", "2:", ":98", "a:b", "nan:98", "2:inf",
                                  "-1:98", "2:101", "50:50", "98:2", "2,98"])
def test_bad_clip_texts(text):
    with pytest.raises(SettingsError) as info:
        parse_clip(text)
    assert info.value.where == "--clip"


def test_a_survey_file_pair_and_the_library_object():
    assert parse_display(clip=[1, 99]).clip == (1.0, 99.0)
    with pytest.raises(SettingsError) as info:
        parse_display(clip=[99, 1])
    assert info.value.where == "--clip"
    # The object made directly names its field, not the command-line option.
    for field, bad in (("colormap", "nope"), ("stretch", "both"), ("clip", (5, 5))):
        with pytest.raises(SettingsError) as info:
            Display(**{field: bad})
        assert info.value.where == field
    assert Display(colormap=colormaps["magma"]).colours()(0.5) == colormaps["magma"](0.5)
    options = Display(stretch="per-slice", clip=(1, 99)).options()
    assert Display(**options) == Display(stretch="per-slice", clip=(1, 99))


@settings(max_examples=50, deadline=None)
@given(low=st.floats(0, 49), high=st.floats(51, 100), seed=st.integers(0, 2**16))
def test_limits_are_numpy_nanpercentiles(low, high, seed):
    rng = np.random.default_rng(seed)
    values = rng.gamma(2.0, size=(20, 30))
    values[rng.random(values.shape) < 0.2] = np.nan
    got = Display(clip=(low, high)).limits(values)
    expected = np.nanpercentile(values, [low, high])  # reference: numpy
    if expected[1] > expected[0]:
        np.testing.assert_allclose(got, expected, rtol=1e-12)
    # Signed: symmetric about zero, the larger of the two ends.
    signed = Display(clip=(low, high)).limits(values - 2.0, signed=True)
    ends = np.nanpercentile(values - 2.0, [low, high])
    assert signed == pytest.approx((-max(abs(ends)), max(abs(ends))))


def test_limits_stay_usable_without_data_or_spread():
    display = Display()
    assert display.limits(np.full((3, 3), np.nan)) == (0.0, 1.0)
    low, high = display.limits(np.full((3, 3), 5.0))
    assert low < 5.0 < high and math.isfinite(low)
    assert display.limits([np.array([1.0, 2.0]), np.array([np.nan, 3.0])]) == pytest.approx(
        tuple(np.nanpercentile([1.0, 2.0, np.nan, 3.0], [2, 98])))
