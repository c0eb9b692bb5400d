"""Tests of the examples in examples/ (scripts on slicer's public API): they run and say what
they should."""

import re
import shutil
import subprocess
import sys
from pathlib import Path

from slicer.pipeline.settings import load_settings

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def test_python_api_example_finds_both_stones(tmp_path):
    proc = subprocess.run([sys.executable, str(EXAMPLES / "python_api.py"), str(tmp_path)],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    found = re.findall(r"buried at ([\d.]+) m: brightest slice centred at ([\d.]+) m",
                       proc.stdout)
    assert len(found) == 2
    for true, seen in found:
        # within a quarter wavelength at 400 MHz and 0.1 m/ns: 0.0625 m (common practice)
        assert abs(float(true) - float(seen)) <= 0.0625


def test_example_survey_file_is_valid(small_survey, tmp_path):
    shutil.copy(EXAMPLES / "survey.toml", tmp_path / "survey.toml")
    shutil.copy(small_survey.line_table, tmp_path / "lines.csv")
    settings = load_settings(tmp_path / "survey.toml")
    assert settings.resolved_velocity == 0.1 and len(settings.requested_windows) == 24
    assert settings.out == tmp_path / "slices-out"


def test_crossed_grid_example_ties_and_places_the_stones(tmp_path):
    proc = subprocess.run([sys.executable, str(EXAMPLES / "crossed_grid.py"), str(tmp_path)],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    before, after = (float(v) for v in re.search(
        r"time misfit ([\d.]+) ns before, ([\d.]+) ns after", proc.stdout).groups())
    assert after < 0.1 * before
    # each line's correction within one sample (0.1 ns) of its true offset about the mean
    assert float(re.search(r"time-zero correction: ([\d.]+) ns", proc.stdout).group(1)) < 0.1
    offsets = re.findall(r"brightest cell ([-+][\d.]+) m east, ([-+][\d.]+) m north", proc.stdout)
    assert len(offsets) == 3
    for dx, dy in offsets:  # within one 0.1 m cell
        assert abs(float(dx)) <= 0.1 + 1e-9 and abs(float(dy)) <= 0.1 + 1e-9
