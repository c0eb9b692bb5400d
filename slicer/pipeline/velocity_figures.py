"""The figures of ``slicer velocity --out``: each line processed, with its fitted hyperbolas.

A line is shown as its radargram (:func:`slicer.outputs.radargram.plot_radargram`): dewow,
background removal and gain as the build applies them (not migrated, which would collapse the
hyperbolas), the signed trace on a diverging colour scale with its colour bar, and a depth axis
at the survey velocity. Each fitted hyperbola is drawn over it: a kept fit as a solid line with
a dot at its apex, a fit set aside as a dashed line with a cross, both with a light halo so they
show on any colour. Their numbers and velocities stand above the data area, never on it, and
the key says which style is which.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

from slicer.core.atomic import atomic_path
from slicer.core.conventions import TWT
from slicer.core.errors import OutputError

#: How kept and set-aside fits are drawn: (line style, apex marker).
KEPT_STYLE, SET_ASIDE_STYLE = ("-", "o"), ("--", "x")


def line_picture(line: xr.DataArray, settings) -> xr.DataArray:
    """``line`` (time-zero corrected, dims ``(trace, twt)``) processed for display and
    decimated (:func:`slicer.outputs.radargram.image_of_samples`): dewow over 1.5 dominant
    periods, the build's background removal and gain, the signed trace."""
    from slicer.outputs.radargram import image_of_samples
    from slicer.processing.steps import _chain_core, chain_plan, dominant_frequency_of
    samples = np.asarray(line.transpose(..., TWT).values, dtype=np.float32)
    twt = np.asarray(line[TWT].values, dtype=float)
    where = str(line.attrs.get("line", "line"))
    window = 1.5 / dominant_frequency_of(samples, dt=float(twt[1] - twt[0]), where=where)
    core, _ = chain_plan(samples, twt, dewow_ns=window, background=settings.background,
                         gain=settings.gain_curve, take_envelope=False)
    trace = _chain_core(samples, **core)
    return image_of_samples(trace, line["x"].values, line["y"].values, twt,
                            name=where, attrs={"line": where}, most=(900, 400))


def plot_line_fits(image: xr.DataArray, fits, path: str | Path, *, kept=(),
                   velocity: float | None = None, dpi: float = 110):
    """Draw ``image`` (:func:`line_picture`) with its ``fits`` (diffractions of one line),
    those in ``kept`` as kept, the rest as set aside; save the PNG ``path`` atomically.

    ``velocity`` (m/ns, the survey's) gives the depth axis. Returns the figure.
    """
    from matplotlib import patheffects
    from matplotlib.lines import Line2D

    from slicer.outputs.radargram import plot_radargram
    figure = plot_radargram(image, velocity=velocity, units="processed amplitude", dpi=dpi)
    ax = figure.axes[0]
    d = image["distance"].values
    halo = [patheffects.withStroke(linewidth=3.2, foreground="white", alpha=0.8)]
    kept_ids = {id(f) for f in kept}
    for k, f in enumerate(sorted(fits, key=lambda f: f.distance), start=1):
        style, marker = KEPT_STYLE if id(f) in kept_ids else SET_ASIDE_STYLE
        x = np.linspace(max(d[0], f.distance - 2.0), min(d[-1], f.distance + 2.0), 200)
        ax.plot(x, f.fit.travel_time(x), linestyle=style, color="black", linewidth=1.3,
                path_effects=halo, label=f"fit {k}")
        ax.plot([f.distance], [f.time], marker=marker, color="black", markersize=6,
                markeredgewidth=1.6, linestyle="none", path_effects=halo)
        # above the data area (axes fraction 1 and up), staggered so neighbours stay apart
        ax.annotate(f"{k}: {f.velocity:.3f}", xy=(f.distance, 1.0),
                    xycoords=ax.get_xaxis_transform(), xytext=(0, 2 + 8 * (k % 2)),
                    textcoords="offset points", ha="center", va="bottom", fontsize=6.5,
                    annotation_clip=False, gid="fit-label")
    ax.set_xlim(d[0], d[-1])
    t = image[TWT].values
    ax.set_ylim(t[-1], t[0])
    key = [Line2D([], [], color="black", linestyle=s, marker=m, label=label)
           for (s, m), label in ((KEPT_STYLE, "kept"), (SET_ASIDE_STYLE, "set aside"))]
    figure.legend(handles=key, loc="upper right", bbox_to_anchor=(0.995, 0.995), fontsize=7,
                  frameon=False, title="fits (m/ns)", title_fontsize=7)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        with atomic_path(path) as tmp:
            figure.savefig(tmp, format="png", dpi=dpi)
    except OSError as exc:
        raise OutputError(f"cannot save figure ({exc})", where=str(path)) from None
    return figure


__all__ = ["KEPT_STYLE", "SET_ASIDE_STYLE", "line_picture", "plot_line_fits"]
