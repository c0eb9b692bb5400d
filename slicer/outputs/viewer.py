"""A viewer in one HTML file: slices, cursor read-out, contrast and the radargram under a click.

:func:`write_viewer` writes a self-contained page (no server, no network, no library: the
script, the style, the slices and the radargrams are all inside it) that any browser opens:

* the slices one at a time, chosen with a slider or the arrow keys, with the slice's depth
  (or time) window beside it;
* under the cursor: the CRS coordinates of the cell and its value;
* contrast: the low and high ends of the colour scale, moved with two sliders;
* a click on the plan shows the radargram of the nearest line (when radargrams are given), with
  the clicked position marked on it.

Slices are decimated for the page (block means down to at most :data:`MAX_SIDE` cells on the
longer side, so the file stays small for any survey) and stored as one byte per cell: 0 for no
data, 1-255 spread linearly between each slice's 0.5th and 99.5th percentiles. The read-out is
therefore the value to within half a step of that range (a 254th of it), and the page says so;
the cells beyond the range (a hundredth of them, the strongest anomalies among them) are kept
exactly as well (float32), so that their read-out is their value, not the range's end.
The page draws the bytes through a 256-colour table taken from a matplotlib colour map.
"""

from __future__ import annotations

import base64
import html
import json
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.atomic import atomic_path
from slicer.core.conventions import X, Y
from slicer.core.errors import SettingsError
from slicer.outputs.cube import slice_axis
from slicer.outputs.radargram import PLOT_AREA

if TYPE_CHECKING:
    import xarray as xr

#: Longest side of a slice on the page, cells.
MAX_SIDE = 600


@dataclass(frozen=True)
class LineImage:
    """A radargram for the viewer: the PNG (its bytes, or the file holding them, read as the
    page is written), the line's ends (CRS, m) and where the data area lies across the image
    (fractions of its width, left and right), to place the marker."""

    name: str
    png: bytes | str | os.PathLike
    start: tuple[float, float]
    end: tuple[float, float]
    left: float = PLOT_AREA[0]
    right: float = PLOT_AREA[0] + PLOT_AREA[2]


def _png(line: LineImage) -> str:
    png = line.png if isinstance(line.png, bytes) else Path(line.png).read_bytes()
    return base64.b64encode(png).decode("ascii")


def _decimate(values: np.ndarray, k: int) -> np.ndarray:
    """The mean of the finite cells of each ``k`` x ``k`` block (a partial block at the far
    edges of what it holds), NaN where a block holds none: float64."""
    if k == 1:
        return values
    ny, nx = values.shape
    total = np.zeros((-(-ny // k), -(-nx // k)))
    count = np.zeros(total.shape, dtype=np.int32)
    # k * k strided additions: a NaN-aware mean over the two short axes of a
    # (rows, k, columns, k) view took five times longer (np.nanmean, 31-50 ms a slice of
    # 1575 x 1582 cells, a build's every slice)
    for i in range(k):
        for j in range(k):
            part = values[i::k, j::k]
            finite = np.isfinite(part)
            total[:part.shape[0], :part.shape[1]] += np.where(finite, part, 0.0)
            count[:part.shape[0], :part.shape[1]] += finite
    with np.errstate(invalid="ignore", divide="ignore"):  # 0 / 0: a block of no data
        return total / count


def _quantise(values: np.ndarray) -> tuple[np.ndarray, float, float]:
    finite = values[np.isfinite(values)]
    if not finite.size:
        return np.zeros(values.shape, np.uint8), 0.0, 1.0
    lo, hi = (float(v) for v in np.percentile(finite, (0.5, 99.5)))
    if hi <= lo:
        hi = lo + 1.0
    q = np.clip(np.rint(1 + 254 * (values - lo) / (hi - lo)), 1, 255)
    q[~np.isfinite(values)] = 0
    return q.astype(np.uint8), lo, hi


def _lut(cmap: str) -> list[list[int]]:
    from matplotlib import colormaps  # here: a build's workers import this module, never this
    try:
        colours = colormaps[cmap]
    except KeyError:
        raise SettingsError(f"unknown colormap {cmap!r}", where="cmap") from None
    return (np.rint(colours(np.linspace(0, 1, 256))[:, :3] * 255)).astype(int).tolist()


def page_step(ny: int, nx: int) -> int:
    """The decimation (cells per page cell along each side) of an ``ny`` x ``nx`` slice."""
    return max(1, math.ceil(max(ny, nx) / MAX_SIDE))


@dataclass(frozen=True)
class PageSlice:
    """One slice as the page holds it (:func:`page_slice`): its bytes (base64), the values
    (the cube's units) of bytes 1 and 255, its ``(rows, columns)`` on the page, and the cells
    beyond ``lo .. hi`` with their values (base64 pairs of little-endian int32 cell index,
    row by row, and float32 value, ascending by index)."""

    lo: float
    hi: float
    data: str
    shape: tuple[int, int]
    beyond: str = ""


#: One cell beyond a slice's display range, as the page stores it (:class:`PageSlice`).
BEYOND = np.dtype([("cell", "<i4"), ("value", "<f4")])


def page_slice(values: np.ndarray, step: int) -> PageSlice:
    """A slice ``(y, x)`` decimated by ``step`` (:func:`page_step`) and quantised for the page.

    A build computes it where each slice is written anyway (its GeoTIFF writer), so that the
    page does not read the slices back; :func:`viewer_data` does the same from a cube.
    """
    page = _decimate(np.asarray(values, dtype=np.float64), step)
    q, lo, hi = _quantise(page)
    flat = page.ravel()
    with np.errstate(invalid="ignore"):  # NaN is neither
        cells = np.flatnonzero((flat < lo) | (flat > hi))
    beyond = np.empty(cells.size, dtype=BEYOND)
    beyond["cell"], beyond["value"] = cells, flat[cells]
    return PageSlice(lo, hi, base64.b64encode(q.tobytes()).decode("ascii"), q.shape,
                     base64.b64encode(beyond.tobytes()).decode("ascii"))


def viewer_data(cube: xr.DataArray, *, lines: Sequence[LineImage] = (),
                cmap: str = "viridis", title: str | None = None,
                slices: Sequence[PageSlice] | None = None) -> dict:
    """Everything the page shows, as JSON-ready values (see :func:`write_viewer`).

    ``slices`` (one :func:`page_slice` per slice of ``cube``, decimated by :func:`page_step`)
    are used instead of reading the cube's values; then only its coordinates are read.
    """
    axis = slice_axis(cube)
    ny, nx = cube.sizes[Y], cube.sizes[X]
    k = page_step(ny, nx)
    x, y = cube[X].values, cube[Y].values
    cell = float(abs(x[1] - x[0])) if nx > 1 else 1.0
    tops = cube[f"{axis}_top"].values if f"{axis}_top" in cube.coords else cube[axis].values
    bottoms = (cube[f"{axis}_bottom"].values if f"{axis}_bottom" in cube.coords
               else cube[axis].values)
    unit = "ns" if axis == "twt" else "m"
    if slices is None:
        slices = [page_slice(cube.isel({axis: i}).values, k) for i in range(cube.sizes[axis])]
    elif len(slices) != cube.sizes[axis]:
        raise ValueError(f"{len(slices)} page slices for a cube of {cube.sizes[axis]}")
    shape = slices[-1].shape
    slices = [{"label": f"{tops[i]:g}-{bottoms[i]:g} {unit}", "lo": s.lo, "hi": s.hi,
               "bytes": s.data, "beyond": s.beyond} for i, s in enumerate(slices)]
    return {
        "title": title or f"{cube.name or 'slices'}: {axis} slices",
        "west": float(x[0] - cell / 2), "north": float(y[0] + cell / 2),
        "cell": cell * k, "width": shape[1], "height": shape[0], "axis": axis,
        "units": str(cube.attrs.get("units", "")), "slices": slices, "lut": _lut(cmap),
        "lines": [{"name": ln.name, "png": _png(ln),
                   "start": list(ln.start), "end": list(ln.end), "left": ln.left,
                   "right": ln.right} for ln in lines],
    }


def write_viewer(cube: xr.DataArray, path: str | os.PathLike, *,
                 lines: Sequence[LineImage] = (), cmap: str = "viridis",
                 title: str | None = None, slices: Sequence[PageSlice] | None = None) -> Path:
    """Write the viewer page for ``cube`` to ``path`` (atomically; the user's file modes).

    Parameters
    ----------
    cube : xarray.DataArray
        A cube (dims ``(depth|twt, y, x)``), in memory or dask-backed (read one slice at a time).
    path : path-like
        The HTML file to write.
    lines : sequence of LineImage, keyword-only
        Radargrams to show on a click (none: clicks show nothing).
    cmap : str, keyword-only
        A matplotlib colour map for the slices.
    title : str, optional, keyword-only
        The page's heading.
    slices : sequence of PageSlice, optional, keyword-only
        The slices already decimated and quantised (:func:`page_slice`): the cube's values
        are then not read.

    Returns
    -------
    pathlib.Path
        The page written.
    """
    data = viewer_data(cube, cmap=cmap, title=title, slices=slices)
    del data["lines"]  # written below one at a time, as they are read
    head, tail = (part.replace("__TITLE__", html.escape(data["title"]))
                  for part in _PAGE.split("__DATA__"))
    path = Path(path)
    # Written piece by piece: at 1 M traces the page is 53 MB, and whole it was held three or
    # four times over. "</" is escaped within each piece: the encoder's pieces are whole
    # strings or punctuation, so none ends inside a "</". The radargrams' base64 (letters,
    # digits, "+", "/", "=") needs no escape, for JSON or for the script element, and is
    # written as it is: the JSON encoder took as long again over 8 MB of it.
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8") as f:
        f.write(head)
        pieces = json.JSONEncoder().iterencode(data)
        last = next(pieces)
        for piece in pieces:
            f.write(last.replace("</", "<\\/"))
            last = piece
        f.write(last[:-1].replace("</", "<\\/"))  # all but the closing brace
        f.write(', "lines": [')
        for k, ln in enumerate(lines):
            about = json.dumps({"name": ln.name, "start": list(ln.start), "end": list(ln.end),
                                "left": ln.left, "right": ln.right})
            f.write(("," if k else "") + about[:-1].replace("</", "<\\/") + ', "png": "')
            f.write(_png(ln))
            f.write('"}')
        f.write("]}")
        f.write(tail)
    return path


_PAGE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>__TITLE__</title>
<style>
body { font: 14px sans-serif; margin: 12px; color: #222; background: #fafafa; }
#top { display: flex; gap: 18px; align-items: center; flex-wrap: wrap; }
#plan { image-rendering: pixelated; border: 1px solid #888; cursor: crosshair;
        max-width: 70vw; max-height: 70vh; }
#readout { font-family: monospace; min-height: 1.4em; }
#radar { position: relative; display: inline-block; margin-top: 10px; }
#radar img { max-width: 90vw; border: 1px solid #888; }
#marker { position: absolute; top: 0; bottom: 0; width: 2px; background: #e00;
          box-shadow: 0 0 0 1px #fff; display: none; }
.note { color: #666; font-size: 12px; }
</style></head><body>
<h2 id="title">__TITLE__</h2>
<div id="top">
 <label>slice <input id="slider" type="range" min="0" value="0" step="1"></label>
 <b id="window"></b>
 <label>low <input id="low" type="range" min="0" max="254" value="0"></label>
 <label>high <input id="high" type="range" min="1" max="255" value="255"></label>
</div>
<p class="note">Arrow keys step through the slices. Values read to within 1/254 of each
slice's display range, and exactly beyond it.
Click the plan to see the nearest line's radargram.</p>
<canvas id="plan"></canvas>
<div id="readout"></div>
<div id="linename"></div>
<div id="radar"><img id="radarimg" alt=""><div id="marker"></div></div>
<script>
"use strict";
const D = __DATA__;
const canvas = document.getElementById("plan");
const ctx = canvas.getContext("2d");
canvas.width = D.width; canvas.height = D.height;
// small grids are drawn larger on screen (whole pixels per cell, about 700 px across)
const zoom = Math.max(1, Math.floor(700 / Math.max(D.width, D.height)));
canvas.style.width = (D.width * zoom) + "px"; canvas.style.height = (D.height * zoom) + "px";
const slider = document.getElementById("slider");
const low = document.getElementById("low"), high = document.getElementById("high");
slider.max = D.slices.length - 1;
const bytes = b64 => Uint8Array.from(atob(b64), c => c.charCodeAt(0));
const cells = D.slices.map(s => bytes(s.bytes));
// the cells beyond each slice's display range: (int32 cell, float32 value) pairs, little-endian
const beyond = D.slices.map(s => {
  const b = bytes(s.beyond), v = new DataView(b.buffer), n = b.length / 8;
  const at = new Int32Array(n), value = new Float32Array(n);
  for (let i = 0; i < n; i++) {
    at[i] = v.getInt32(8 * i, true);
    value[i] = v.getFloat32(8 * i + 4, true);
  }
  return {at, value};
});
function exact(k, cell) {  // the value of a cell beyond the range, or null
  const {at, value} = beyond[k];
  let a = 0, b = at.length - 1;
  while (a <= b) {
    const m = (a + b) >> 1;
    if (at[m] === cell) return value[m];
    if (at[m] < cell) a = m + 1; else b = m - 1;
  }
  return null;
}
let current = 0;
function draw() {
  const q = cells[current], img = ctx.createImageData(D.width, D.height);
  const lo = Number(low.value), hi = Math.max(Number(high.value), lo + 1);
  for (let i = 0; i < q.length; i++) {
    const o = 4 * i;
    if (q[i] === 0) { img.data[o] = 212; img.data[o+1] = 212; img.data[o+2] = 212; }
    else {
      const t = Math.min(255, Math.max(0, Math.round(255 * (q[i] - lo) / (hi - lo))));
      const c = D.lut[t];
      img.data[o] = c[0]; img.data[o+1] = c[1]; img.data[o+2] = c[2];
    }
    img.data[o+3] = 255;
  }
  ctx.putImageData(img, 0, 0);
  document.getElementById("window").textContent = D.slices[current].label;
}
function show(i) { current = Math.max(0, Math.min(D.slices.length - 1, i));
                   slider.value = current; draw(); }
slider.addEventListener("input", () => show(Number(slider.value)));
low.addEventListener("input", draw); high.addEventListener("input", draw);
document.addEventListener("keydown", e => {
  if (e.key === "ArrowRight" || e.key === "ArrowDown") { show(current + 1); e.preventDefault(); }
  if (e.key === "ArrowLeft" || e.key === "ArrowUp") { show(current - 1); e.preventDefault(); }
});
function where(e) {
  const r = canvas.getBoundingClientRect();  // the border lies outside the drawn cells
  const col = Math.floor((e.clientX - r.left - canvas.clientLeft) / canvas.clientWidth * D.width);
  const row = Math.floor((e.clientY - r.top - canvas.clientTop) / canvas.clientHeight * D.height);
  return {col, row, x: D.west + (col + 0.5) * D.cell, y: D.north - (row + 0.5) * D.cell};
}
canvas.addEventListener("mousemove", e => {
  const p = where(e), s = D.slices[current];
  if (p.col < 0 || p.row < 0 || p.col >= D.width || p.row >= D.height) return;
  const cell = p.row * D.width + p.col, q = cells[current][cell], known = exact(current, cell);
  const v = q === 0 ? "no data" : (known !== null ? known : s.lo + (q - 1) / 254 * (s.hi - s.lo))
    .toPrecision(4);
  document.getElementById("readout").textContent =
    `x ${p.x.toFixed(2)}  y ${p.y.toFixed(2)}  ${s.label}  value ${v} ${D.units}`;
});
canvas.addEventListener("click", e => {
  if (!D.lines.length) return;
  const p = where(e);
  let best = null;
  for (const ln of D.lines) {
    const [x0, y0] = ln.start, [x1, y1] = ln.end, dx = x1 - x0, dy = y1 - y0;
    const len2 = dx * dx + dy * dy;
    const t = len2 > 0 ? Math.max(0, Math.min(1, ((p.x - x0) * dx + (p.y - y0) * dy) / len2)) : 0;
    const d = Math.hypot(p.x - (x0 + t * dx), p.y - (y0 + t * dy));
    if (best === null || d < best.d) best = {ln, t, d};
  }
  const img = document.getElementById("radarimg"), mark = document.getElementById("marker");
  const place = () => {
    mark.style.left = ((best.ln.left + best.t * (best.ln.right - best.ln.left)) *
                       img.clientWidth) + "px";
    mark.style.display = "block";
  };
  img.onload = place;
  img.src = "data:image/png;base64," + best.ln.png;
  document.getElementById("linename").textContent =
    `${best.ln.name}: ${(best.d).toFixed(2)} m from the click`;
  mark.dataset.fraction = best.t.toFixed(4);
});
show(0);
</script></body></html>
"""

__all__ = ["MAX_SIDE", "LineImage", "PageSlice", "page_slice", "page_step", "viewer_data",
           "write_viewer"]
