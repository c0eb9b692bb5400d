"""Shared fixtures: small synthetic surveys written once per test session."""

import os

import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture(scope="session")
def small_survey(tmp_path_factory):
    """Six zigzag lines of 81 traces over two point targets (SEG-Y, dt 0.1 ns, t0 3 ns)."""
    from slicer.synthetic import Ground, PointTarget, Radar, grid_lines, write_survey

    folder = tmp_path_factory.mktemp("small") / "survey"
    ground = Ground(velocity=0.1, attenuation_db_per_m=2.0,
                    targets=(PointTarget(512001.05, 4650001.05, 0.55),
                             PointTarget(512002.95, 4650001.55, 1.25, amplitude=1.5)))
    radar = Radar(frequency_mhz=400.0, sample_interval_ns=0.1, samples=512, time_zero_ns=3.0,
                  seed=7)
    lines = grid_lines(west=512000.0, south=4650000.0, length=4.0, width=2.5,
                       line_spacing=0.5, trace_spacing=0.05, direction="x", zigzag=True)
    return write_survey(folder, ground, radar, lines, format="segy", crs="EPSG:32633",
                        progress=False)


@pytest.fixture(scope="session")
def demo_files(tmp_path_factory):
    """The demo survey written once (SEG-Y)."""
    from slicer.synthetic import demo_survey, write_survey

    folder = tmp_path_factory.mktemp("demo") / "survey"
    ground, radar, lines, crs = demo_survey()
    return write_survey(folder, ground, radar, lines, format="segy", crs=crs, progress=False)
