"""Tests of slicer.velocity.model_file: velocity-model files (TOML) written and read back."""

import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.core.errors import InputFileError, LineTableError, SettingsError
from slicer.velocity.model_file import read_velocity_model, write_velocity_model
from slicer.velocity.models import (
    ConstantVelocity,
    LateralVelocity,
    LayeredVelocity,
    depth_of_time,
)

# ---------------------------------------------------------------------------------- files

LAYERS = LayeredVelocity.by_depth([0.0, 0.8, 2.0], [0.11, 0.07, 0.13], [0.004, 0.003, 0.005])
POINTS = LateralVelocity([0.0, 10.0, 0.0, 10.0], [0.0, 0.0, 8.0, 8.0],
                         [0.08, 0.12, 0.10, 0.09], [0.004, 0.006, 0.005, 0.002],
                         length_scale=5.0)
layer_tables = st.lists(
    st.tuples(st.floats(0.03, 0.29), st.floats(0.05, 5.0), st.floats(0.0, 0.01)),
    min_size=1, max_size=5)

MODELS = [
    ConstantVelocity(0.1, 0.005, note='test "quoted"'),
    ConstantVelocity.from_permittivity(9.0, 0.5),
    LAYERS,
    LayeredVelocity.from_rms([25.0, 50.0], [0.12, 0.101980], [0.002, 0.003]),
    POINTS,
]


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.describe()[:20])
def test_file_round_trip(tmp_path, model):
    path = write_velocity_model(model, tmp_path / "v.toml")
    assert read_velocity_model(path) == model
    assert [p.name for p in tmp_path.iterdir()] == ["v.toml"]  # no temporary file left


def test_file_forms_from_the_docstring(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.12\n'
                    'velocity_std = 0.0\n[[layer]]\ntop_depth = 1.5\nvelocity = 0.08\n'
                    'velocity_std = 0.0\n')
    assert depth_of_time(read_velocity_model(path), 50.0) == pytest.approx(2.5)
    path.write_text('kind = "layered"\n[[layer]]\nbase_time = 25.0\nrms_velocity = 0.12\n'
                    'velocity_std = 0.0\n[[layer]]\nbase_time = 50.0\nrms_velocity = 0.10198\n'
                    'velocity_std = 0.0\n')
    assert read_velocity_model(path).velocity == pytest.approx((0.12, 0.08), abs=1e-4)


LAYER = "[[layer]]\n{top} = {t}\nvelocity = {v}\nvelocity_std = 0.0\n"


@pytest.mark.parametrize("text, error, where", [
    ('kind = "layered"\n' + LAYER.format(top="top_depth", t=0, v=0.1)
     + LAYER.format(top="top_depth", t=2, v=0.1) + LAYER.format(top="top_depth", t=1, v=0.1),
     SettingsError, ":layer[2]"),
    ('kind = "layered"\n' + LAYER.format(top="top_time", t=0, v=0.1)
     + LAYER.format(top="top_time", t=20, v=0.3), SettingsError, ":layer[1]"),
    ('kind = "layered"\n' + LAYER.format(top="top_time", t=0, v=0.1)
     + LAYER.format(top="top_depth", t=2, v=0.1), LineTableError, ":layer[1]"),
    ('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\n', LineTableError,
     ":layer[0]"),
    ('kind = "layered"\n[[layer]]\ntop_depth = 0.0\nvelocity = 0.1\nvelocity_std = 0\n'
     'colour = 1\n', LineTableError, ":layer[0]"),
    ('kind = "layered"\n[[layer]]\nbase_time = 20.0\nrms_velocity = 0.15\nvelocity_std = 0\n'
     '[[layer]]\nbase_time = 40.0\nrms_velocity = 0.05\nvelocity_std = 0\n', SettingsError,
     ":layer[1]"),
    ('kind = "layered"\n[[layer]]\ntop_time = 0.0\nrms_velocity = 0.1\nvelocity_std = 0\n',
     LineTableError, ":layer[0]"),
    ('kind = "layered"\n', LineTableError, ""),
    ('kind = "wavy"\nvelocity = 0.1\n', LineTableError, ":kind"),
    ('velocity = 0.1\nvelocity_std = 0.0\n', LineTableError, ":kind"),
    ('kind = "constant"\nvelocity = 0.1\n', LineTableError, ""),
    ('kind = "constant"\nvelocity = 0.35\nvelocity_std = 0.0\n', SettingsError, ":velocity"),
    ('kind = "constant"\nvelocity = "fast"\nvelocity_std = 0.0\n', LineTableError, ""),
    ('kind = "constant"\nvelocity = 0.1\nvelocity_std = -1.0\n', SettingsError,
     ":velocity_std"),
    ('kind = "constant"\npermittivity = 0.5\npermittivity_std = 0.0\n', SettingsError,
     ":permittivity"),
    ('kind = "constant"\nvelocity = 0.1\nvelocity_std = 0.0\npermittivity = 4.0\n',
     LineTableError, ""),
    ('kind = "constant"\nvelocity = 0.1\nvelocity_std = 0.0\nspeed = 1\n', LineTableError, ""),
    ('kind = "lateral"\n[[point]]\nx = 0\ny = 0\nvelocity = 0.1\nvelocity_std = 0\n',
     LineTableError, ""),
    ('kind = "lateral"\nlength_scale = 2.0\n[[point]]\nx = 0\ny = 0\nvelocity = 0.1\n'
     'velocity_std = 0\n[[point]]\nx = 1\ny = 0\nvelocity = 0.3\nvelocity_std = 0\n',
     SettingsError, ":point[1]"),
    ('kind = "lateral"\nlength_scale = 2.0\n[[point]]\nx = 0\nvelocity = 0.1\n'
     'velocity_std = 0\n', LineTableError, ":point[0]"),
    ('kind = "constant"\nvelocity = \n', LineTableError, ""),
])
def test_bad_files_are_refused_naming_file_and_table(tmp_path, text, error, where):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(error) as err:
        read_velocity_model(path)
    assert err.value.where == f"{path}{where}"
    assert str(path) in str(err.value)


def test_missing_file(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        read_velocity_model(tmp_path / "none.toml")


@settings(max_examples=30, deadline=None)
@given(layer_tables)
def test_file_round_trip_of_any_layered_model(layers):
    v, thick, s = (list(c) for c in zip(*layers, strict=True))
    model = LayeredVelocity.by_depth(np.concatenate([[0], np.cumsum(thick[:-1])]), v, s)
    with tempfile.TemporaryDirectory() as folder:
        path = write_velocity_model(model, Path(folder) / "m.toml")
        assert read_velocity_model(path) == model


@given(note=st.text(min_size=1, max_size=40))
@settings(max_examples=60, deadline=None)
def test_any_note_round_trips(tmp_path_factory, note):
    """A note with control characters, quotes or newlines wrote a file slicer could not read
    back when the TOML was written by hand; tomli-w escapes it (TOML 1.0, section Strings)."""
    path = tmp_path_factory.mktemp("note") / "v.toml"
    model = LayeredVelocity.by_time([0.0, 10.0], [0.1, 0.08], [0.004, 0.003], note=note)
    write_velocity_model(model, path)
    back = read_velocity_model(path)
    assert back.note == note
    np.testing.assert_array_equal(back.velocity, model.velocity)
