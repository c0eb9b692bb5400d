"""The viewer page, driven in a real headless browser (Debian's chromium through selenium).

What a user does is checked, not the page's source: the page loads without console errors, the
slider and the arrow keys change the slice and its depth label and the drawn pixels, the cursor
reads out CRS coordinates and a value, and a click shows the nearest line's radargram with the
marker at the clicked place along it.
"""

from __future__ import annotations

import io
import os
import shutil
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from slicer.outputs.cube import new_cube
from slicer.outputs.viewer import MAX_SIDE, LineImage, viewer_data, write_viewer

WEST, NORTH, CELL = 500000.0, 4200010.0, 0.1


def small_cube(nx=60, ny=40, n=5):
    data = np.zeros((n, ny, nx), dtype=np.float32)
    for k in range(n):
        data[k, :, 10 * k:10 * k + 5] = 1.0 + k  # a bright band moving east with depth
    data[:, :5, :5] = np.nan
    tops = 0.1 * np.arange(n)
    return new_cube(data, west=WEST, north=NORTH, cell=CELL, crs="EPSG:32633", top=tops,
                    bottom=tops + 0.1)


def png(colour):
    import matplotlib.image
    buf = io.BytesIO()
    matplotlib.image.imsave(buf, np.full((40, 100, 3), colour, dtype=np.uint8), format="png")
    return buf.getvalue()


def test_data_bytes_quantise_and_decimate():
    cube = small_cube()
    data = viewer_data(cube)
    assert data["width"] == 60 and data["height"] == 40 and len(data["slices"]) == 5
    import base64
    q = np.frombuffer(base64.b64decode(data["slices"][2]["bytes"]), np.uint8).reshape(40, 60)
    assert (q[:5, :5] == 0).all()  # no data
    s = data["slices"][2]
    # the bright band reads back within half a step of the display range
    value = s["lo"] + (q[20, 22] - 1) / 254 * (s["hi"] - s["lo"])
    assert abs(value - 3.0) <= (s["hi"] - s["lo"]) / 254
    big = viewer_data(small_cube(nx=1500, ny=300, n=1))
    assert big["width"] == 500 and big["height"] == 100 and big["cell"] == pytest.approx(0.3)
    assert max(big["width"], big["height"]) <= MAX_SIDE


def test_cells_beyond_the_display_range_keep_their_values():
    # The bytes saturate at the 0.5th and 99.5th percentiles, so a strong anomaly's cells
    # would read as the range's end; the page keeps those cells' values (float32) beside the
    # bytes. Reference: the slice's own values, to float32 rounding.
    import base64

    from slicer.outputs.viewer import BEYOND
    cube = small_cube()
    values = cube.values.copy()
    values[2, 30, 31] = 35.16  # far above the 99.5th percentile
    values[2, 31, 50] = -7.25  # far below the 0.5th
    data = viewer_data(cube.copy(data=values))
    s = data["slices"][2]
    pairs = np.frombuffer(base64.b64decode(s["beyond"]), BEYOND)
    flat = values[2].ravel()
    expected = np.flatnonzero(np.isfinite(flat) & ((flat < s["lo"]) | (flat > s["hi"])))
    np.testing.assert_array_equal(pairs["cell"], expected)
    np.testing.assert_array_equal(pairs["value"], flat[expected].astype(np.float32))
    assert {30 * 60 + 31, 31 * 60 + 50} <= set(pairs["cell"].tolist())
    assert s["hi"] < 35.16 and s["lo"] > -7.25  # the bytes alone could not say it
    # no cell beyond a range that holds every value
    assert np.frombuffer(base64.b64decode(data["slices"][0]["beyond"]), BEYOND).size <= \
        np.isfinite(cube.values[0]).sum() // 100 + 2


def test_slices_given_already_quantised_make_the_same_page_data():
    from slicer.outputs.viewer import page_slice, page_step
    cube = small_cube(nx=1300, ny=70, n=3)
    step = page_step(70, 1300)
    given = [page_slice(cube.values[i], step) for i in range(3)]
    assert viewer_data(cube.copy(data=np.full(cube.shape, np.nan, np.float32)),
                       slices=given) == viewer_data(cube)  # the values are not read
    with pytest.raises(ValueError, match="2 page slices for a cube of 3"):
        viewer_data(cube, slices=given[:2])


def test_a_closing_tag_in_the_data_cannot_end_the_script(tmp_path):
    # HTML Living Standard, "restrictions for contents of script elements": "</script" inside
    # a script element ends it, so "</" is written "<\/" (the same string to JSON)
    import json
    cube = small_cube()
    line = LineImage("a</script>b", png((10, 20, 30)), (WEST, NORTH - 1), (WEST + 5, NORTH - 1))
    page = write_viewer(cube, tmp_path / "v.html", lines=[line], title="t</b>").read_text()
    assert "a</script>b" not in page and "a<\\/script>b" in page
    data = page.split("const D = ", 1)[1].split(";\n", 1)[0]
    assert json.loads(data) == json.loads(json.dumps(viewer_data(cube, lines=[line],
                                                                 title="t</b>")))
    assert "<title>t&lt;/b&gt;</title>" in page  # the title escaped as HTML


@pytest.fixture(scope="module")
def browser():
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    driver_path = shutil.which("chromedriver")
    if chromium is None or driver_path is None:
        why = "no chromium/chromedriver (Debian: apt-get install chromium chromium-driver)"
        if os.environ.get("SLICER_REQUIRE_BROWSER"):  # CI (.ci/run) installs them: fail there
            pytest.fail(why)
        pytest.skip(why)
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    options = webdriver.ChromeOptions()
    options.binary_location = chromium
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1400,1000"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(driver_path), options=options)
    yield driver
    driver.quit()


def test_the_page_works_in_a_browser(tmp_path, browser):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By
    from selenium.webdriver.common.keys import Keys
    cube = small_cube()
    lines = [LineImage("L000", png((200, 0, 0)), (WEST, NORTH - 1.0), (WEST + 6.0, NORTH - 1.0)),
             LineImage("L001", png((0, 0, 200)), (WEST, NORTH - 3.0), (WEST + 6.0, NORTH - 3.0))]
    page = write_viewer(cube, tmp_path / "viewer.html", lines=lines, title="test survey")
    browser.get(page.as_uri())
    errors = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert errors == []
    label = browser.find_element(By.ID, "window")
    assert label.text == "0-0.1 m"

    def pixels():
        return browser.execute_script(
            "const c=document.getElementById('plan');"
            "return Array.from(c.getContext('2d').getImageData(0,0,c.width,c.height).data"
            ".filter((v,i)=>i%4===0)).join(',')")

    first = pixels()
    slider = browser.find_element(By.ID, "slider")
    browser.execute_script("arguments[0].value=3;arguments[0].dispatchEvent(new Event('input'))",
                           slider)
    assert label.text == "0.3-0.4 m" and pixels() != first
    browser.find_element(By.TAG_NAME, "body").send_keys(Keys.ARROW_RIGHT)
    assert label.text == "0.4-0.5 m"
    plan = browser.find_element(By.ID, "plan")
    size = plan.size
    # the cell at column 42, row 10 (the band of slice 4 spans columns 40-44)
    dx = (42.5 / 60 - 0.5) * size["width"]
    dy = (10.5 / 40 - 0.5) * size["height"]
    ActionChains(browser).move_to_element_with_offset(plan, dx, dy).perform()
    readout = browser.find_element(By.ID, "readout").text
    assert f"x {WEST + 4.25:.2f}" in readout and f"y {NORTH - 1.05:.2f}" in readout
    assert "value 5" in readout  # slice 4 holds 1 + 4 on the band
    ActionChains(browser).move_to_element_with_offset(plan, dx, dy).click().perform()
    assert browser.find_element(By.ID, "linename").text.startswith("L000")
    marker = browser.find_element(By.ID, "marker")
    assert marker.is_displayed()
    # 4.25 m along a 6 m line
    assert float(marker.get_attribute("data-fraction")) == pytest.approx(4.25 / 6, abs=0.02)
    assert browser.find_element(By.ID, "radarimg").get_attribute("src").startswith(
        "data:image/png;base64,")
    assert [e for e in browser.get_log("browser") if e["level"] == "SEVERE"] == []


def test_the_read_out_of_a_cell_beyond_the_range_is_its_value(tmp_path, browser):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By
    cube = small_cube()
    values = cube.values.copy()
    values[0, 20, 42] = 35.16  # one strong cell, above the slice's 99.5th percentile
    page = write_viewer(cube.copy(data=values), tmp_path / "viewer.html")
    browser.get(page.as_uri())
    plan = browser.find_element(By.ID, "plan")

    def read(col, row):
        dx = ((col + 0.5) / 60 - 0.5) * plan.size["width"]
        dy = ((row + 0.5) / 40 - 0.5) * plan.size["height"]
        ActionChains(browser).move_to_element_with_offset(plan, dx, dy).perform()
        return browser.find_element(By.ID, "readout").text

    assert "value 35.16 " in read(42, 20)
    assert "value 0.000 " in read(43, 20)  # inside the range: the bytes' value (0 here)
    assert [e for e in browser.get_log("browser") if e["level"] == "SEVERE"] == []


def test_a_builds_viewer_shows_the_clicked_lines_radargram(small_survey, tmp_path, browser):
    """The page a build writes, with the build's own radargrams: a click on a line shows its
    picture (the PNG file the build wrote, byte for byte)."""
    import base64
    import json

    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By

    import slicer
    settings = slicer.load_settings(small_survey.line_table, out=tmp_path / "o",
                                    sample_interval=0.1, time_zero=3.0, velocity=0.1,
                                    depths="0:2.4:0.1", cell=0.05)
    slicer.build(settings, progress=False)
    out = tmp_path / "o"
    record = json.loads((out / "record.json").read_text())
    line = record["radargrams"][2]
    browser.get((out / "viewer.html").as_uri())
    assert [e for e in browser.get_log("browser") if e["level"] == "SEVERE"] == []
    data = browser.execute_script("return {west: D.west, north: D.north, cell: D.cell, "
                                  "width: D.width, height: D.height}")
    plan = browser.find_element(By.ID, "plan")
    # a quarter of the way along the line, in plan pixels from the canvas centre
    (x0, y0), (x1, y1) = line["start"], line["end"]
    x, y = x0 + 0.25 * (x1 - x0), y0 + 0.25 * (y1 - y0)
    col = (x - data["west"]) / data["cell"]
    row = (data["north"] - y) / data["cell"]
    dx = (col / data["width"] - 0.5) * plan.size["width"]
    dy = (row / data["height"] - 0.5) * plan.size["height"]
    ActionChains(browser).move_to_element_with_offset(plan, dx, dy).click().perform()
    assert browser.find_element(By.ID, "linename").text.startswith(line["line"])
    src = browser.find_element(By.ID, "radarimg").get_attribute("src")
    assert base64.b64decode(src.split(",", 1)[1]) == (out / line["file"]).read_bytes()
    assert float(browser.find_element(By.ID, "marker").get_attribute("data-fraction")) == \
        pytest.approx(0.25, abs=0.03)


@settings(max_examples=80, deadline=None)
@given(ny=st.integers(1, 40), nx=st.integers(1, 40), k=st.integers(1, 5),
       seed=st.integers(0, 2**16), holes=st.floats(0, 1))
def test_decimation_is_the_nan_mean_of_each_block(ny, nx, k, seed, holes):
    # Reference: numpy.nanmean over the k x k blocks of the slice padded with NaN to whole
    # blocks (a block of no data is NaN).
    from slicer.outputs.viewer import _decimate
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(ny, nx)).astype(np.float32)
    values[rng.random((ny, nx)) < holes] = np.nan
    padded = np.pad(values.astype(np.float64), ((0, -ny % k), (0, -nx % k)),
                    constant_values=np.nan)
    blocks = padded.reshape(padded.shape[0] // k, k, padded.shape[1] // k, k)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        reference = np.nanmean(blocks, axis=(1, 3))
    got = _decimate(values, k)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(reference))
    np.testing.assert_allclose(got, reference, rtol=1e-12, equal_nan=True)
