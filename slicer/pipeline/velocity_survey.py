"""The survey-wide velocity from the diffraction hyperbolas of every line (``slicer velocity``).

Each line is read, placed and time-zero corrected, its hyperbolas are found and fitted
(:func:`slicer.velocity.diffraction.find_diffractions`), and the fits of all lines are combined by
:func:`slicer.velocity.combine.survey_velocity` (secondary events set aside, linear targets
crossed obliquely corrected, groups weighed by quality, a bootstrap over lines for the random
error and refits over narrower apertures for the systematic one; the rule is in that module's
docstring). Depths are given with the survey velocity.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.atomic import prepare_output_dir
from slicer.core.errors import SettingsError
from slicer.core.numbers import real
from slicer.core.physics import check_separation, depth_from_time
from slicer.core.progress import bar_for
from slicer.geometry.survey import load_line, survey_info
from slicer.pipeline.settings import BuildSettings
from slicer.pipeline.velocity_figures import line_picture, plot_line_fits
from slicer.processing.steps import correct_time_zero, dominant_frequency
from slicer.velocity.combine import survey_velocity
from slicer.velocity.coupling import HEIGHT_STD, correct_for_coupling
from slicer.velocity.diffraction import DEFAULT_VELOCITIES, find_diffractions
from slicer.velocity.model_file import write_velocity_model
from slicer.velocity.models import ConstantVelocity
from slicer.velocity.targets import TargetRadius, radius_for, target_radius


@dataclass
class VelocityAnalysis:
    """Fits of every line and the survey-wide estimate."""

    velocity: float
    velocity_std: float
    fits: list
    kept: list
    fit_std: float = math.nan
    groups: tuple = ()
    assessed: tuple = ()
    separation: float = 0.0
    velocity_std_lines: float = math.nan
    velocity_std_aperture: float = 0.0
    #: Half the widest disagreement with another well-supported group of fits, m/ns (0: none).
    velocity_group_spread: float = 0.0
    #: The survey CRS of the fits' x and y (None: a local grid).
    crs: str | None = None
    #: Antenna height the picks were corrected with, m (None: not corrected).
    antenna_height: float | None = None
    #: Target radii given (:class:`~slicer.velocity.targets.TargetRadius`), empty for none.
    target_radius: tuple = ()

    def to_json(self) -> dict:
        """``velocity``, ``velocity_std`` (m/ns; the standard uncertainty: in quadrature
        ``velocity_std_lines``, the bootstrap over lines, ``velocity_std_aperture``, the
        systematic part from refits over narrower apertures and, with the picks corrected for
        the antennas' coupling, the antenna height's uncertainty and that of given target
        radii), ``velocity_group_spread`` (half the widest disagreement with another
        well-supported group of fits, 0 for none), ``velocity_std_fits`` (from the fits' own
        errors),
        ``antenna_height`` (m, or None), ``target_radius`` (the radii given, m, each with
        ``radius_std`` and its ``route``, a list of ``[x, y]``, m), ``groups`` and
        ``fits`` with position, time, depth (at the survey velocity, bistatic with the antenna
        separation), shape (``"point"``, ``"offset"`` or ``"round"``; ``delay``, ns, the
        fitted time offset and ``radius``, m, the fitted, given (``radius_given``) or
        equivalent radius ``-delay v / 2``), ``velocity_std_aperture`` and what the
        combination made of each
        (``reason``, ``corrected_velocity`` for a linear target crossed at ``crossing_angle``
        degrees)."""
        kept = {id(f) for f in self.kept}
        notes = {id(a.fit): a for a in self.assessed}

        def number(value):
            return None if value is None or not math.isfinite(value) else float(value)

        def row(f):
            note = notes.get(id(f))
            return {"line": f.line, "velocity": f.velocity, "velocity_std": f.velocity_std,
                    "velocity_std_aperture": getattr(f, "velocity_std_aperture", 0.0),
                    "x": f.x, "y": f.y, "time": f.time,
                    "depth": float(depth_from_time(f.time, velocity=self.velocity,
                                                   separation=self.separation)),
                    "score": f.score, "kept": id(f) in kept, "shape": f.fit.shape,
                    "radius": f.fit.equivalent_radius, "radius_std": f.fit.radius_std,
                    "radius_given": bool(getattr(f.fit, "radius_given", False)),
                    "delay": f.fit.delay, "delay_std": f.fit.delay_std,
                    "reason": note.reason if note else None,
                    "corrected_velocity": number(note.velocity) if note else None,
                    "crossing_angle": number(note.angle) if note else None}

        return {"velocity": self.velocity, "velocity_std": self.velocity_std,
                "velocity_std_fits": number(self.fit_std),
                "velocity_std_lines": number(self.velocity_std_lines),
                "velocity_std_aperture": number(self.velocity_std_aperture),
                "velocity_group_spread": number(self.velocity_group_spread),
                "antenna_separation": self.separation,
                "antenna_height": self.antenna_height,
                "target_radius": [t.to_json() for t in self.target_radius],
                "units": {"velocity": "m/ns", "x": "m", "y": "m", "time": "ns", "depth": "m",
                          "radius": "m", "delay": "ns", "crossing_angle": "degree",
                          "velocity_std": "m/ns",
                          "antenna_separation": "m", "antenna_height": "m",
                          "target_radius": "m"},
                "groups": [g._asdict() for g in self.groups],
                "fits": [row(f) for f in self.fits]}

    def model(self) -> ConstantVelocity:
        """The estimate as a velocity model for ``slicer build --velocity-model``."""
        return ConstantVelocity(self.velocity, self.velocity_std,
                                note=f"from {len(self.kept)} of {len(self.fits)} diffraction "
                                     "hyperbolas (slicer velocity)")


def analyse_velocity(settings: BuildSettings, *, progress: bool = True,
                     figures: str | os.PathLike | None = None,
                     separation: float | None = None, antenna_height: float | None = None,
                     height_std: float = HEIGHT_STD,
                     target_radius=None, earliest: float | None = None) -> VelocityAnalysis:
    """Find and fit the diffraction hyperbolas of every line; combine them.

    Parameters
    ----------
    settings : BuildSettings
        The survey (lines, sample interval, time zero, positions).
    progress : bool
        Show a progress bar (on a terminal).
    figures : path-like, optional
        Folder for one PNG per line: the processed radargram with each fitted hyperbola drawn
        on it, kept and set-aside fits told apart (:mod:`slicer.pipeline.velocity_figures`).
    separation : float, optional
        Transmitter-receiver separation, m (default: the survey's ``antenna_separation``, or
        0): a picked time zero is the direct wave less ``separation / c`` and the hyperbolas
        are fitted with the bistatic travel time.
    antenna_height : float, optional
        Height of the antennas above the ground, m (0: on it). Given, the picks of every
        hyperbola are corrected for antennas coupled to the ground and refitted
        (:func:`~slicer.velocity.coupling.correct_for_coupling`); by default they are not (the
        straight-ray hyperbola, right for antennas well above the ground or data without
        the boundary's coupling, such as slicer's own synthetic surveys).
    height_std : float
        Uncertainty of ``antenna_height``, m, carried into the systematic uncertainty.
    target_radius : float, TargetRadius or sequence of TargetRadius, optional
        Radii known for the targets, m (a float: every target, with the default uncertainty
        :data:`~slicer.velocity.targets.RADIUS_STD_SHARE`; a
        :class:`~slicer.velocity.targets.TargetRadius` with a route: the fits near it): the
        hyperbolas they apply to are refitted as round targets of that radius
        (:func:`~slicer.velocity.coupling.correct_for_coupling`, with or without the
        coupling correction), whose velocity is otherwise read fast as a point's and cannot
        be fitted with a free radius (:mod:`slicer.velocity.targets`). The radius's
        uncertainty is carried into the systematic uncertainty.
    earliest : float, optional
        Earliest apex time searched, ns (default two dominant periods, below what remains of
        the direct wave): lower it for targets right under the surface (rebar at 2-5 cm
        cover in concrete).

    Returns
    -------
    VelocityAnalysis
        The survey-wide velocity and its standard uncertainty (m/ns, with its parts), every
        fitted hyperbola and those kept in the estimate, the separation (m), the survey CRS,
        the antenna height and the target radii used (see :meth:`VelocityAnalysis.to_json`).
    """
    from slicer.geometry.positioning import prepare_survey
    if separation is None:
        separation = settings.antenna_separation or 0.0
    separation = check_separation(separation, where="separation")
    targets = _targets(target_radius)
    settings = prepare_survey(settings)
    info = survey_info(settings.lines, sample_interval_ns=settings.sample_interval)
    earliest = None if earliest is None else real(earliest, where="--earliest")
    if earliest is not None and not 0 <= earliest < info.record_ns:
        raise SettingsError(f"{earliest:g} ns lies outside the record after time zero (0 to "
                            f"{info.record_ns:g} ns at most)", where="--earliest")
    fits, pictures = [], []
    with bar_for(enabled=progress, total=info.n_traces, desc="diffraction search",
                 unit="trace") as bar:
        for entry in settings.lines:
            line = load_line(entry, settings, sample_interval_ns=info.sample_interval_ns)
            line = correct_time_zero(line, time_zero=settings.time_zero,
                                     threshold=settings.time_zero_threshold,
                                     separation=separation)
            found = find_diffractions(line, separation=separation, min_time=earliest)
            if antenna_height is not None or targets:
                found = _refit(line, found, antenna_height, separation, height_std, targets)
            fits.extend(found)
            if figures is not None:  # drawn once the survey's velocity and choice are known
                pictures.append((line_picture(line, settings), found))
            bar.update(line.sizes["trace"])
    try:
        estimate = survey_velocity(fits)
    except SettingsError as exc:  # say where the search looked: shallow targets lie above it
        if len(fits) >= 3:
            raise
        try:
            start = (f"{earliest:g} ns" if earliest is not None else
                     f"{2.0 / dominant_frequency(line):.3g} ns (two periods of the dominant "
                     "frequency)")
        except SettingsError:  # a silent last line: no frequency to say it by
            start = "two periods of the dominant frequency"
        raise SettingsError(f"{exc.message}: apexes were searched from {start} down, at "
                            f"velocities {DEFAULT_VELOCITIES[0]:g}-{DEFAULT_VELOCITIES[-1]:g} "
                            "m/ns; for targets just under the surface give --earliest NS",
                            where=exc.where) from None
    for image, found in pictures:
        plot_line_fits(image, found, Path(figures) / f"{image.attrs['line']}.png",
                       kept=estimate.kept, velocity=float(estimate.velocity))
    return VelocityAnalysis(float(estimate.velocity), float(estimate.std), fits,
                            list(estimate.kept), float(estimate.fit_std), estimate.groups,
                            estimate.assessed, separation, float(estimate.std_lines),
                            float(estimate.std_aperture), float(estimate.group_spread),
                            settings.crs,
                            None if antenna_height is None else float(antenna_height),
                            targets)


def _targets(given) -> tuple:
    """``target_radius`` of :func:`analyse_velocity` as a tuple of TargetRadius."""
    if given is None:
        return ()
    if isinstance(given, TargetRadius):
        return (given,)
    if isinstance(given, int | float):
        return (target_radius(given, where="target_radius"),)
    out = tuple(given)
    if not all(isinstance(t, TargetRadius) for t in out):
        raise SettingsError("give a radius in m, a TargetRadius or a sequence of them",
                            where="target_radius")
    radius_for((), out)  # one default at most
    return out


def _refit(line, found, antenna_height, separation, height_std, targets) -> list:
    """The line's hyperbolas refitted, each with the radius given for it (if any), with the
    picks corrected for the antennas' coupling when ``antenna_height`` is given; in order."""
    given = radius_for(found, targets)
    out = list(found)
    for target in dict.fromkeys(given):  # each radius once, in order of first use
        idx = [k for k, g in enumerate(given) if g == target]
        if target is None and antenna_height is None:
            continue
        refitted = correct_for_coupling(
            line, [found[k] for k in idx], antenna_height=antenna_height,
            separation=separation, height_std=height_std,
            target_radius=None if target is None else target.radius,
            radius_std=0.0 if target is None else target.std)
        for k, d in zip(idx, refitted, strict=True):
            out[k] = d
    return out


def write_velocity_outputs(analysis: VelocityAnalysis, out: str | os.PathLike, *,
                           overwrite: bool = False) -> Path:
    """Write ``velocity.toml`` (a model for ``--velocity-model``) and ``picks.gpkg`` into
    ``out``; returns the model's path.

    ``picks.gpkg`` holds one point per fitted hyperbola apex, in the survey CRS (layer
    ``picks``: ``line``, ``depth`` m, ``time`` ns, ``velocity`` and ``velocity_std`` m/ns,
    ``score``, ``kept`` 1 or 0, ``shape``, ``reason``), for a GIS beside the slices.
    """
    out = prepare_output_dir(out, overwrite=overwrite)
    # the folder was emptied or the user gave overwrite: the files it holds may be replaced
    write_picks(analysis, out / "picks.gpkg", overwrite=True)
    return write_velocity_model(analysis.model(), out / "velocity.toml", overwrite=True)


def write_picks(analysis: VelocityAnalysis, path: str | os.PathLike, *,
                overwrite: bool = False) -> Path:
    """The fits as a point layer ``picks`` of a GeoPackage (see :func:`write_velocity_outputs`);
    an existing ``path`` is replaced only with ``overwrite``."""
    import shapely

    from slicer.outputs.vector import Layer, write_geopackage
    rows = analysis.to_json()["fits"]
    fields = {
        "line": np.array([str(r["line"]) for r in rows], dtype=object),
        "depth": np.array([r["depth"] for r in rows], dtype=np.float64),
        "time": np.array([r["time"] for r in rows], dtype=np.float64),
        "velocity": np.array([r["velocity"] for r in rows], dtype=np.float64),
        "velocity_std": np.array([r["velocity_std"] for r in rows], dtype=np.float64),
        "score": np.array([r["score"] for r in rows], dtype=np.float64),
        "kept": np.array([int(bool(r["kept"])) for r in rows], dtype=np.int32),
        "shape": np.array([str(r["shape"]) for r in rows], dtype=object),
        "reason": np.array([str(r["reason"] or "") for r in rows], dtype=object)}
    points = [shapely.Point(r["x"], r["y"]) for r in rows]
    return write_geopackage(path, [Layer("picks", "Point", points, fields)], crs=analysis.crs,
                            overwrite=overwrite)
