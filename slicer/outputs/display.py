"""How slices are coloured: the colour map, one colour range for all slices or one each, and
the percentiles that clip it.

:class:`Display` holds the three settings, checked once, for the overview
(:func:`slicer.outputs.figures.plot_overview`) and sections
(:func:`slicer.outputs.section.plot_section`); :func:`parse_display` reads the command line's
text forms (``--colormap NAME``, ``--stretch shared|per-slice``, ``--clip LOW:HIGH``).
matplotlib is imported only when a colour map is looked up, so parsing options stays quick.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from slicer.core.errors import SettingsError

#: Colour of cells without data: a neutral grey that none of the usual sequential maps use.
NODATA_COLOUR = "#d4d4d4"

#: Colour map of an envelope (or any unsigned) cube: perceptually uniform, readable in grey.
DEFAULT_COLORMAP = "viridis"

#: Colour map of a signed cube (named ``signed_...``): diverging, its middle colour at zero.
SIGNED_COLORMAP = "PuOr_r"

#: Extra names for matplotlib's grey ramp, as people spell it.
GREY_NAMES = {"greyscale": "gray", "grayscale": "gray"}

#: The ways of stretching values over the colour map.
STRETCHES = ("shared", "per-slice")

#: Default percentiles (0-100) of the finite values at the two ends of the colour map: a few
#: outliers (a metal pipe, an edge spike) do not squeeze the rest into one colour.
DEFAULT_CLIP = (2.0, 98.0)


#: Most cells drawn over all the panels of an overview (about 64 MB of float32); many slices
#: are drawn coarser than a panel's largest side, still finer than their few hundred pixels on
#: paper. Here, in a module without matplotlib, so the memory estimate can read it at once.
MAX_SHEET_CELLS = 16_000_000

def colormap_names() -> list[str]:
    """Every colour map name :class:`Display` accepts (matplotlib's and :data:`GREY_NAMES`)."""
    from matplotlib import colormaps
    return sorted([*colormaps, *GREY_NAMES])


def check_colormap(colormap, *, where: str = "colormap"):
    """Return ``colormap`` if matplotlib knows it (a name or a Colormap), else raise.

    Raises
    ------
    SettingsError
        For an unknown name, with the closest known names (difflib) in the message.
    """
    from matplotlib.colors import Colormap
    if isinstance(colormap, Colormap):
        return colormap
    names = colormap_names()
    if isinstance(colormap, str) and colormap in names:
        return colormap
    close = difflib.get_close_matches(str(colormap), names, n=3, cutoff=0.6)
    hint = f"; did you mean {', '.join(close)}?" if close else "; any matplotlib colour map name"
    raise SettingsError(f"unknown colour map {colormap!r}{hint}", where=where)


def check_stretch(stretch, *, where: str = "stretch") -> str:
    """Return ``stretch`` if it is one of :data:`STRETCHES`, else raise SettingsError."""
    if stretch in STRETCHES:
        return stretch
    raise SettingsError(f"stretch must be {' or '.join(STRETCHES)}, got {stretch!r}",
                        where=where)


def check_clip(clip, *, where: str = "clip") -> tuple[float, float]:
    """Return ``clip`` as two floats with ``0 <= low < high <= 100``, else raise SettingsError."""
    try:
        low, high = (float(v) for v in clip)
    except (TypeError, ValueError):
        raise SettingsError(f"clip must be two percentiles (low, high), got {clip!r}",
                            where=where) from None
    if not (0 <= low < high <= 100):  # also refuses NaN
        raise SettingsError(f"clip percentiles must satisfy 0 <= low < high <= 100, got "
                            f"{low:g}:{high:g}", where=where)
    return low, high


def parse_clip(text: str, *, where: str = "--clip") -> tuple[float, float]:
    """Read ``"LOW:HIGH"`` (percentiles, e.g. ``"2:98"``) as a pair of floats.

    Raises
    ------
    SettingsError
        If the text is not two numbers around one colon, or they are out of order or range.
    """
    parts = str(text).split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        low, high = (float(p) for p in parts)
    except ValueError:
        raise SettingsError(f"expected LOW:HIGH percentiles such as 2:98, got {text!r}",
                            where=where) from None
    return check_clip((low, high), where=where)


@dataclass(frozen=True)
class Display:
    """How to colour slices; checked when made.

    Parameters
    ----------
    colormap : str or matplotlib.colors.Colormap, optional
        Any matplotlib colour map (``"gray"``, also ``"greyscale"``, for grey). By default
        :data:`DEFAULT_COLORMAP` (perceptually uniform) or, for a signed cube,
        :data:`SIGNED_COLORMAP` centred on zero.
    stretch : {"shared", "per-slice"}
        ``"shared"``: one colour range for every slice, so slices compare by colour;
        ``"per-slice"``: each slice on its own range, so faint deep slices show detail.
    clip : (float, float)
        Percentiles (0-100) of the finite values at the two ends of the colour map; a signed
        cube's range is then made symmetric about zero (the larger of the two ends).

    Raises
    ------
    SettingsError
        If a setting is invalid (``where`` names it).
    """

    colormap: object = None
    stretch: str = "shared"
    clip: tuple[float, float] = DEFAULT_CLIP

    def __post_init__(self):
        if self.colormap is not None:
            check_colormap(self.colormap)
        check_stretch(self.stretch)
        object.__setattr__(self, "clip", check_clip(self.clip))

    @property
    def per_slice(self) -> bool:
        """Whether each slice has its own colour range."""
        return self.stretch == "per-slice"

    def colours(self, *, signed: bool = False):
        """The colour map to draw with, cells without data in :data:`NODATA_COLOUR`."""
        from matplotlib import colormaps
        chosen = self.colormap
        if chosen is None:
            chosen = SIGNED_COLORMAP if signed else DEFAULT_COLORMAP
        if isinstance(chosen, str):
            chosen = colormaps[GREY_NAMES.get(chosen, chosen)]
        return chosen.with_extremes(bad=NODATA_COLOUR)

    def limits(self, values: Sequence[np.ndarray] | np.ndarray, *,
               signed: bool = False) -> tuple[float, float]:
        """(vmin, vmax): the :attr:`clip` percentiles of the finite ``values`` (one array or a
        list of arrays taken together).

        Symmetric about zero when ``signed``. Falls back to (0, 1) without any finite value
        and widens a zero-width range, so the colour scale is always usable.
        """
        arrays = [values] if isinstance(values, np.ndarray) else list(values)
        finite = np.concatenate([np.asarray(a)[np.isfinite(a)].astype(np.float64).ravel()
                                 for a in arrays] or [np.empty(0)])
        if finite.size == 0:
            vmin, vmax = 0.0, 1.0
        else:
            vmin, vmax = (float(v) for v in np.percentile(finite, self.clip))
        if signed:  # zero, the sign change, sits at the middle of the diverging map
            vmax = max(abs(vmin), abs(vmax))
            vmin = -vmax
        if vmax <= vmin:
            pad = abs(vmin) * 0.01 or 1.0
            vmin, vmax = vmin - pad, vmax + pad
        return vmin, vmax

    def options(self) -> dict:
        """The settings as keyword arguments of ``plot_overview`` and ``plot_section``."""
        return {"colormap": self.colormap, "stretch": self.stretch, "clip": self.clip}


def parse_display(*, colormap: str | None = None, stretch: str | None = None,
                  clip: str | Sequence[float] | None = None) -> Display:
    """The :class:`Display` of the command line's text forms; an option not given keeps its
    default.

    Parameters
    ----------
    colormap : str, optional
        ``--colormap NAME``: any matplotlib colour map name.
    stretch : str, optional
        ``--stretch shared|per-slice``.
    clip : str or (float, float), optional
        ``--clip LOW:HIGH`` percentiles, ``0 <= LOW < HIGH <= 100``; a pair of numbers is
        taken as it is (a survey file's ``clip = [2, 98]``).

    Raises
    ------
    SettingsError
        One line, ``where`` naming the option (``"--colormap"``, ``"--stretch"``,
        ``"--clip"``).
    """
    if colormap is not None:
        colormap = check_colormap(str(colormap).strip(), where="--colormap")
    stretch = "shared" if stretch is None else check_stretch(str(stretch).strip().lower(),
                                                              where="--stretch")
    if clip is None:
        clip = DEFAULT_CLIP
    elif isinstance(clip, str):
        clip = parse_clip(clip)
    else:
        clip = check_clip(clip, where="--clip")
    return Display(colormap=colormap, stretch=stretch, clip=clip)


def display_from(colormap=None, stretch: str = "shared", clip=DEFAULT_CLIP, *, cmap=None,
                 percentile=None) -> Display:
    """The :class:`Display` of a plotting function's keywords; ``cmap`` and ``percentile`` are
    the older names of ``colormap`` and ``clip``, still accepted.

    Raises
    ------
    SettingsError
        If a setting is invalid, or given under both of its names.
    """
    if cmap is not None:
        if colormap is not None:
            raise SettingsError("give colormap or its older name cmap, not both", where="cmap")
        colormap = cmap
    if percentile is not None:
        if tuple(clip) != DEFAULT_CLIP:
            raise SettingsError("give clip or its older name percentile, not both",
                                where="percentile")
        clip = percentile
    return Display(colormap=colormap, stretch=stretch, clip=clip)


def relative_scale(display: Display, *, signed: bool = False):
    """Colour-bar ticks, their labels and a caption for slices each on its own range
    (``"per-slice"``), the values mapped to 0-1 of each slice's range."""
    if signed:
        return [0.0, 0.5, 1.0], ["-r", "0", "+r"], "each slice from -r to +r"
    low, high = display.clip
    return [0.0, 1.0], [f"{low:g} %", f"{high:g} %"], "percentile of each slice"


__all__ = ["DEFAULT_CLIP", "DEFAULT_COLORMAP", "MAX_SHEET_CELLS", "Display", "NODATA_COLOUR",
           "SIGNED_COLORMAP", "STRETCHES", "check_clip", "check_colormap", "check_stretch",
           "colormap_names", "display_from", "parse_clip", "parse_display", "relative_scale"]
