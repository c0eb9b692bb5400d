"""Tests of slicer.geometry.channels: multi-channel arrays, channel tables and one positioned
Line per channel.

The geometry is hand-computed: offsets are in the frame of travel, across positive to the right
of the direction of travel seen from above and along positive forward (common practice for
towed antenna arrays).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import InputFileError, SettingsError
from slicer.geometry.channels import ChannelTable, expand_channels, read_channel_table

E0, N0 = 512000.0, 4650000.0


def _swath(ref_x, ref_y, n_channels=3, *, samples=5, channel_coord=None):
    n = len(ref_x)
    data = np.arange(n_channels * n * samples, dtype=np.float32).reshape(n_channels, n, samples)
    coords = {"trace": np.arange(n), "twt": 0.1 * np.arange(samples),
              "x": ("trace", np.asarray(ref_x, float)), "y": ("trace", np.asarray(ref_y, float))}
    if channel_coord is not None:
        coords["channel"] = channel_coord
    return xr.DataArray(data, dims=("channel", "trace", "twt"), coords=coords, name="amplitude",
                        attrs={"line": "S1", "source": "S1.sgy", "history": ""})


TABLE = ChannelTable(("0", "1", "2"), across=(-0.5, 0.0, 0.5), along=(0.0, 0.0, 0.2))


def test_channels_offset_across_and_along_travel():
    t = np.arange(20) * 0.1
    # Heading north: right of travel is east.
    lines = expand_channels(_swath(np.full(20, E0), N0 + t), TABLE)
    assert [ln.attrs["line"] for ln in lines] == ["S1-ch0", "S1-ch1", "S1-ch2"]
    np.testing.assert_allclose(lines[0]["x"].values, E0 - 0.5)
    np.testing.assert_allclose(lines[2]["x"].values, E0 + 0.5)
    np.testing.assert_allclose(lines[2]["y"].values, N0 + t + 0.2)
    np.testing.assert_allclose(lines[1]["y"].values, N0 + t)
    # Heading east: right of travel is south.
    east = expand_channels(_swath(E0 + t, np.full(20, N0)), TABLE)
    np.testing.assert_allclose(east[2]["y"].values, N0 - 0.5)
    np.testing.assert_allclose(east[2]["x"].values, E0 + t + 0.2)
    for k, line in enumerate(east):
        assert line.dims == ("trace", "twt") and "channel" not in line.coords
        np.testing.assert_array_equal(line.values, _swath(E0 + t, np.full(20, N0)).values[k])
        np.testing.assert_allclose(line["distance"].values, t, atol=1e-9)
        assert line.attrs["channel"] == str(k)
        assert line.attrs["channel_across_m"] == TABLE.across[k]


@settings(max_examples=40, deadline=None)
@given(heading=st.floats(-np.pi, np.pi), across=st.floats(-2, 2), along=st.floats(-2, 2))
def test_offset_is_rigid_in_the_frame_of_travel(heading, across, along):
    # On a straight track the channel sits at along * forward + across * right of the reference,
    # right = forward turned 90 degrees clockwise (seen from above).
    u = np.array([np.cos(heading), np.sin(heading)])
    right = np.array([u[1], -u[0]])
    s = 0.1 * np.arange(30)
    ref = np.array([E0, N0]) + s[:, None] * u
    table = ChannelTable(("0",), (across,), (along,))
    (line,) = expand_channels(_swath(ref[:, 0], ref[:, 1], 1), table)
    got = np.column_stack([line["x"].values, line["y"].values]) - ref
    np.testing.assert_allclose(got, np.tile(along * u + across * right, (30, 1)), atol=1e-8)


def test_channels_on_a_circle_keep_their_radius():
    # Travelling counter-clockwise on a circle of radius 10 m, right of travel points outward,
    # so a channel 0.5 m to the right runs on a circle of 10.5 m (and one 0.5 m left on 9.5 m).
    theta = np.linspace(0, np.pi, 181)
    ref_x, ref_y = E0 + 10 * np.cos(theta), N0 + 10 * np.sin(theta)
    lines = expand_channels(_swath(ref_x, ref_y),
                            ChannelTable(("0", "1", "2"), (-0.5, 0.0, 0.5), (0.0, 0.0, 0.0)))
    for line, radius in zip(lines, (9.5, 10.0, 10.5), strict=True):
        r = np.hypot(line["x"].values - E0, line["y"].values - N0)
        # Exact where the 1 m smoothing chord is centred (vertices 0.175 m apart); within half
        # a chord of the ends it is one-sided and the offset tilts slightly.
        np.testing.assert_allclose(r[3:-3], radius, atol=1e-9)
        np.testing.assert_allclose(r, radius, atol=1e-3)
        # Path length of a polygon inscribed in the circle, vertices every degree.
        chord = 2 * radius * np.sin(np.radians(0.5))
        d = line["distance"].values
        np.testing.assert_allclose(d[-4] - d[3], 174 * chord, rtol=1e-9)


def test_channel_names_and_lists_of_lines(tmp_path):
    table_path = tmp_path / "array.csv"
    table_path.write_text("channel,across,along\n3,0.25,0\n1,-0.25,0\n2,0,0.1\n")
    table = read_channel_table(table_path)
    assert table.channels == ("3", "1", "2") and table.offset(1) == (-0.25, 0.0)
    t = np.arange(10) * 0.2
    swath = _swath(np.full(10, E0), N0 + t, channel_coord=np.array([1, 2, 3]))
    lines = expand_channels(swath, table_path)
    assert [ln.attrs["channel"] for ln in lines] == ["1", "2", "3"]  # the swath's order
    np.testing.assert_allclose(lines[2]["x"].values, E0 + 0.25)
    np.testing.assert_allclose(lines[1]["y"].values, N0 + t + 0.1)
    per_channel = []
    for k in range(3):
        line = swath.isel(channel=k, drop=True)
        line.attrs["channel"] = int(swath["channel"].values[k])
        per_channel.append(line)
    again = expand_channels(per_channel, table)
    for a, b in zip(lines, again, strict=True):
        np.testing.assert_allclose(a["x"].values, b["x"].values)
        np.testing.assert_allclose(a["y"].values, b["y"].values)


def test_tables_that_disagree_with_the_data_refused(tmp_path):
    swath = _swath(np.full(5, E0), N0 + np.arange(5.0))
    four = ChannelTable(("0", "1", "2", "3"), (0, 0, 0, 0), (0, 0, 0, 0), where="four.csv")
    with pytest.raises(InputFileError, match=r"four\.csv: the table lists 4 channel\(s\), the "
                                             r"swath has 3.*table channel\(s\) 3 are not"):
        expand_channels(swath, four)
    one_based = ChannelTable(("1", "2", "3"), (0, 0, 0), (0, 0, 0), where="ob.csv")
    with pytest.raises(InputFileError, match=r"ob\.csv: .*swath channel\(s\) 0 are not in the "
                                             "table"):
        expand_channels(swath, one_based)
    with pytest.raises(SettingsError, match="channel\\(s\\) 1 listed twice"):
        ChannelTable(("1", "1"), (0, 0), (0, 0))
    with pytest.raises(InputFileError, match="needs per-trace 'x'"):
        expand_channels(swath.drop_vars("x"), TABLE)
    with pytest.raises(InputFileError, match="dims \\(channel, trace, twt\\)"):
        expand_channels(swath.isel(channel=0), TABLE)
    still = _swath(np.full(5, E0), np.full(5, N0))
    with pytest.raises(InputFileError, match="no direction of travel"):
        expand_channels(still, TABLE)
    with pytest.raises(SettingsError, match="smoothing: must be a positive"):
        expand_channels(swath, TABLE, smoothing=0.0)


@pytest.mark.parametrize(("text", "message"), [
    ("channel,across,along\n1,0,0\n1,0.5,0\n", r"bad\.csv:3: channel 1 is already listed at "
                                                r".*bad\.csv:2"),
    ("channel,across,along\n1,left,0\n", r"bad\.csv:2: column across: 'left' is not a number"),
    ("channel,across,along\n1,0,\n", r"bad\.csv:2: column along is empty"),
    ("channel,across\n1,0\n", r"bad\.csv: missing column\(s\) along"),
    ("channel,across,along\n", r"bad\.csv: channel table lists no channels"),
    ("", r"bad\.csv: channel table is empty"),
])
def test_bad_channel_tables(tmp_path, text, message):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputFileError, match=message):
        read_channel_table(path)
