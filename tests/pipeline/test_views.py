"""A build's radargrams and viewer page (slicer.pipeline.view), written with every build."""

from __future__ import annotations

import json

import numpy as np
import pytest
from PIL import Image

import slicer
import slicer.outputs.radargram as radargram
from slicer.cli import main
from slicer.outputs.radargram_pages import RadargramPages
from slicer.pipeline.line_tasks import window_times
from slicer.pipeline.view import file_names, write_build_viewer

OPTIONS = dict(sample_interval=0.1, time_zero=3.0, velocity=0.1, depths="0:2.4:0.1", cell=0.05)


@pytest.fixture(scope="module")
def drawn(small_survey, tmp_path_factory):
    """A build of the small survey, with what each radargram was drawn with."""
    calls = []
    original = RadargramPages.save
    patch = pytest.MonkeyPatch()

    def spy(self, image, path, **kwargs):
        calls.append((image.attrs["line"], kwargs))
        return original(self, image, path, **kwargs)

    patch.setattr(RadargramPages, "save", spy)
    try:
        out = tmp_path_factory.mktemp("views") / "o"
        settings = slicer.load_settings(small_survey.line_table, out=out, **OPTIONS)
        result = slicer.build(settings, progress=False)
    finally:
        patch.undo()
    return out, result, calls


def test_every_line_gets_a_readable_radargram_listed_in_the_record(drawn, small_survey):
    out, result, _ = drawn
    record = json.loads((out / "record.json").read_text())
    stems = [p.stem for p in sorted(small_survey.folder.glob("*.sgy"))]
    assert len(stems) == 6  # the fixture's six lines
    assert [r["line"] for r in record["radargrams"]] == stems
    assert sorted(p.name for p in (out / "radargrams").iterdir()) == [f"{s}.png" for s in stems]
    for r in record["radargrams"]:
        assert r["file"] in record["outputs"]
        with Image.open(out / r["file"]) as im:  # Pillow decodes it whole
            im.load()
            assert im.format == "PNG" and im.size[0] > 500 and im.size[1] > 300
    assert "viewer.html" in record["outputs"]
    assert (out / "viewer.html").stat().st_size > 0
    assert {p.relative_to(out).as_posix() for p in result.files} >= {
        "viewer.html", *(r["file"] for r in record["radargrams"])}


def test_the_ends_in_the_record_are_the_line_tables(drawn, small_survey):
    out, _, _ = drawn
    record = json.loads((out / "record.json").read_text())
    table = np.genfromtxt(small_survey.line_table, delimiter=",", names=True, dtype=None,
                          encoding="utf-8")
    for row, r in zip(table, record["radargrams"], strict=True):
        assert r["start"] == pytest.approx([row["start_x"], row["start_y"]], abs=1e-6)
        assert r["end"] == pytest.approx([row["end_x"], row["end_y"]], abs=1e-6)


def test_depth_slices_of_one_velocity_draw_a_depth_axis_and_the_windows_in_time(drawn):
    _, _, calls = drawn
    assert len(calls) == 6
    for _, kwargs in calls:
        assert kwargs["velocity"] == 0.1
        top, bottom = kwargs["windows"]
        # t = 2 d / v (common practice, zero antenna separation): 0.1 m at 0.1 m/ns is 2 ns
        np.testing.assert_allclose(top[:3], [0.0, 2.0, 4.0], atol=1e-9)
        np.testing.assert_allclose(bottom[:3], [2.0, 4.0, 6.0], atol=1e-9)


def test_the_depth_axis_is_on_the_page(drawn):
    """The drawn figure carries the depth axis label (matplotlib's text, not our own)."""
    _, result, _ = drawn
    image = radargram.image_of_samples(np.ones((10, 20)), np.arange(10.0), np.zeros(10),
                                       np.arange(20.0), attrs={"line": "L"})
    figure = radargram.plot_radargram(image, velocity=0.1)
    labels = [t.get_text() for t in figure.findobj(lambda o: hasattr(o, "get_text"))]
    assert any(label.startswith("depth (m)") for label in labels)
    no_velocity = radargram.plot_radargram(image)
    labels = [t.get_text() for t in no_velocity.findobj(lambda o: hasattr(o, "get_text"))]
    assert not any(label.startswith("depth (m)") for label in labels)


def test_time_slices_have_no_depth_axis(small_survey, tmp_path, monkeypatch):
    seen = []
    original = RadargramPages.save
    monkeypatch.setattr(RadargramPages, "save",
                        lambda self, image, path, **kw: seen.append(kw) or original(
                            self, image, path, **kw))
    settings = slicer.load_settings(small_survey.line_table, out=tmp_path / "o",
                                    sample_interval=0.1, time_zero=3.0, times="0:40:4",
                                    cell=0.05)
    slicer.build(settings, progress=False)
    assert seen and all(kw["velocity"] is None for kw in seen)
    np.testing.assert_allclose(seen[0]["windows"][0][:2], [0.0, 4.0])


def test_the_option_turns_them_off_and_the_viewer_stays(small_survey, tmp_path):
    code = main(["build", str(small_survey.line_table), "--sample-interval", "0.1",
                 "--time-zero", "3", "--velocity", "0.1", "--depths", "0:2.4:0.1", "--cell",
                 "0.05", "--no-radargrams", "--out", str(tmp_path / "o"), "-q"])
    assert code == 0
    record = json.loads((tmp_path / "o" / "record.json").read_text())
    assert record["settings"]["radargrams"] is False
    assert record["radargrams"] == []
    assert not (tmp_path / "o" / "radargrams").exists()
    assert "viewer.html" in record["outputs"]


def test_build_viewer_is_written_again_from_the_folder(drawn, tmp_path, capsys):
    import shutil
    out, _, _ = drawn
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    first = (copy / "viewer.html").read_text()
    (copy / "viewer.html").unlink()
    assert main(["view", str(copy)]) == 0
    assert str(copy / "viewer.html") in capsys.readouterr().out
    # the same page: the slices read back from the GeoTIFFs, the same radargrams
    assert write_build_viewer(copy).read_text() == first


def test_a_folder_without_a_build_is_refused(tmp_path, capsys):
    assert main(["view", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("slicer: error:") and err.count("\n") == 1


def test_line_names_become_unique_file_names():
    assert file_names(["L1", "a/b c", "L1", "l1", "..."]) == [
        "radargrams/L1.png", "radargrams/a_b_c.png", "radargrams/L1_2.png",
        "radargrams/l1_3.png", "radargrams/line.png"]


def test_layered_depth_windows_have_no_single_time():
    from slicer.gridding.windows import make_windows

    class Layered:
        def profile(self):  # a model has a profile: its windows differ from trace to trace
            raise AssertionError("not called")

    windows = make_windows(0.0, 1.0, 0.5, axis="depth")
    assert window_times(windows, Layered()) is None
    assert window_times(windows, None) is None
    times = make_windows(0.0, 10.0, 5.0, axis="twt")
    np.testing.assert_array_equal(window_times(times, None)[0], [0.0, 5.0])


def _line_image(name="L"):
    return radargram.image_of_samples(np.random.default_rng(0).normal(size=(30, 40)),
                                      np.arange(30.0), np.zeros(30), np.arange(40.0),
                                      attrs={"line": name, "velocity": None, "windows": None})


def test_a_painter_that_cannot_write_raises_in_the_building_thread(tmp_path):
    from slicer.core.errors import SlicerError
    from slicer.pipeline.view import RadargramPainter
    (tmp_path / "radargrams").write_text("a file where the folder goes")
    with RadargramPainter(tmp_path) as painter:
        for k in range(3 * RadargramPainter.QUEUED):  # more than it queues: add never hangs
            painter.add(_line_image(f"L{k}"))
        with pytest.raises((SlicerError, OSError)):
            painter.result()


def test_a_failing_build_stops_the_painter_and_leaves_nothing(tmp_path):
    import threading

    from slicer.pipeline.view import RadargramPainter
    with pytest.raises(RuntimeError), RadargramPainter(tmp_path) as painter:
        painter.add(_line_image())
        raise RuntimeError("the build failed")
    assert not any(t.name == "radargrams" for t in threading.enumerate())
    with RadargramPainter(tmp_path / "ok") as painter:
        (tmp_path / "ok").mkdir()
        painter.add(_line_image("A"))
        painter.add(_line_image("A"))
        done = painter.result()
    assert [d["file"] for d in done] == ["radargrams/A.png", "radargrams/A_2.png"]
    assert painter.seconds > 0
