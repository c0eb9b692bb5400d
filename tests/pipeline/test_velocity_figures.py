"""The figures of slicer velocity: processed line, depth axis, colour bar, kept vs set aside."""

import pytest

from slicer.pipeline.settings import load_settings
from slicer.pipeline.velocity_figures import (
    KEPT_STYLE,
    SET_ASIDE_STYLE,
    line_picture,
    plot_line_fits,
)


@pytest.fixture(scope="module")
def line_and_fits(small_survey):
    from slicer.geometry.positioning import prepare_survey
    from slicer.geometry.survey import load_line
    from slicer.processing.steps import correct_time_zero
    from slicer.velocity.diffraction import find_diffractions
    settings = prepare_survey(load_settings(small_survey.line_table, sample_interval=0.1,
                                            time_zero=3.0))
    line = correct_time_zero(load_line(settings.lines[2], settings, sample_interval_ns=0.1),
                             time_zero=3.0)
    fits = find_diffractions(line)
    assert len(fits) >= 2  # the small survey's two point targets (tests/conftest.py)
    return line, settings, fits


def test_kept_and_set_aside_fits_differ_by_line_and_marker(line_and_fits, tmp_path):
    line, settings, fits = line_and_fits
    image = line_picture(line, settings)
    figure = plot_line_fits(image, fits, tmp_path / "f.png", kept=fits[:1], velocity=0.1)
    assert (tmp_path / "f.png").stat().st_size > 10_000
    ax = figure.axes[0]
    curves = [ln for ln in ax.lines if ln.get_label().startswith("fit ")]
    apexes = [ln for ln in ax.lines if ln.get_marker() in ("o", "x")]
    assert sorted(c.get_linestyle() for c in curves) == sorted(
        [KEPT_STYLE[0]] + [SET_ASIDE_STYLE[0]] * (len(fits) - 1))
    assert sorted(a.get_marker() for a in apexes) == sorted(
        [KEPT_STYLE[1]] + [SET_ASIDE_STYLE[1]] * (len(fits) - 1))
    # a depth axis at the survey velocity and a colour bar with units
    from matplotlib.text import Text
    labels = {t.get_text() for t in figure.findobj(Text)}
    assert "depth (m) at 0.1 m/ns" in labels and "processed amplitude" in labels


def test_labels_never_cover_the_data(line_and_fits, tmp_path):
    line, settings, fits = line_and_fits
    figure = plot_line_fits(line_picture(line, settings), fits, tmp_path / "f.png",
                            kept=fits, velocity=0.1)
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    data_area = figure.axes[0].get_window_extent(renderer)
    labels = [t for t in figure.axes[0].texts if t.get_gid() == "fit-label"]
    assert len(labels) == len(fits)
    for text in labels:
        box = text.get_window_extent(renderer)
        assert box.y0 >= data_area.y1 - 0.5  # wholly above the data area
    # numbered by position along the line, each with its velocity (m/ns)
    assert sorted(t.get_text().split(":")[0] for t in labels) == sorted(
        str(k) for k in range(1, len(fits) + 1))


def test_the_picture_is_processed_not_raw(line_and_fits):
    # background removal takes out what is the same on every trace (the direct wave): where
    # the raw line's mean trace peaks, the processed picture's is a small part of its range
    import numpy as np
    line, settings, _ = line_and_fits
    mean = line.mean("trace")
    peak = float(mean["twt"][int(np.argmax(np.abs(mean.values)))])
    picture = line_picture(line, settings)
    assert picture.dims == ("distance", "twt")
    at_peak = abs(float(picture.mean("distance").sel(twt=peak, method="nearest")))
    assert at_peak < 0.05 * float(np.percentile(np.abs(picture.values), 99.5))
