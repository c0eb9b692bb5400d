import pytest

import slicer
from slicer.core.errors import SettingsError
from slicer.pipeline.budget import estimate, human, parse_bytes


@pytest.mark.parametrize("text, expected", [("1GB", 10**9), ("512MiB", 512 * 2**20),
                                            ("2e9", 2 * 10**9), (3000, 3000), ("1.5 gb", 1.5e9)])
def test_parse_bytes(text, expected):
    assert parse_bytes(text) == int(expected)


@pytest.mark.parametrize("bad", ["lots", "-1GB", "0", "1XB", True, "nan", None, [1]])
def test_bad_sizes(bad):
    with pytest.raises(SettingsError, match="--memory-limit"):
        parse_bytes(bad)


def test_estimate_grows_with_survey_and_workers():
    base = dict(n_traces=10_000, max_line_traces=400, n_samples=512, n_slices=24,
                grid_cells=40_000, tile=256, neighbours=8, workers=1, cube_in_memory=False)
    one = estimate(**base)
    assert estimate(**{**base, "workers": 2}).lines == 2 * one.lines
    assert estimate(**{**base, "n_traces": 20_000}).table == 2 * one.table
    assert estimate(**{**base, "cube_in_memory": True}).cube == 4 * 24 * 40_000
    assert "trace table" in one.describe() and human(1.5e9) == "1.40 GiB"


def test_build_that_cannot_fit_is_refused_before_it_starts(small_survey, tmp_path):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1",
                                    memory_limit="1MB", out=tmp_path / "o")
    with pytest.raises(SettingsError, match=r"--memory-limit: this build needs about .* more "
                                            r"than the memory limit of 0\.95 MiB \(1MB\)"):
        slicer.build(settings, progress=False)
    assert not (tmp_path / "o").exists()
    ok = slicer.build_cube(settings.replace(memory_limit="200MB"), progress=False)
    assert 0 < ok.record["memory_estimate_bytes"] < 200e6


def test_streamed_build_counts_the_overview_panels():
    from slicer.outputs.figures import MAX_SHEET_CELLS
    from slicer.pipeline.budget import estimate
    base = dict(n_traces=10_000, max_line_traces=500, n_samples=512, n_slices=24,
                grid_cells=40_000, tile=256, neighbours=8.0, workers=2)
    small = estimate(**base, cube_in_memory=False)
    assert small.overview == 4 * 24 * 40_000  # every cell of every slice is drawn
    big = estimate(**{**base, "grid_cells": 10**7}, cube_in_memory=False)
    assert big.overview == 4 * MAX_SHEET_CELLS and "overview" in big.describe()
    assert estimate(**base, cube_in_memory=True).overview == 0
