"""A survey laid out on a local grid (tapes and pegs), tied to the survey CRS by control points.

Lines are often set out in local metres (``0,0`` at a corner peg, ``y`` along the baseline);
a few pegs are then surveyed in the project CRS.  Fitting a plane transform to those pairs maps
the whole line table into the CRS:

- :func:`fit_similarity`: 4 parameters (one scale, one rotation, two shifts; a 2D Helmert
  transform), from 2 or more distinct points;
- :func:`fit_affine`: 6 parameters (independent scales, shear, rotation, shifts), from 3 or
  more points not on one line.

Both are linear least squares solved with :func:`numpy.linalg.lstsq` on coordinates centred on
their means (UTM magnitudes would otherwise ruin the conditioning).  The residual of a point is
the distance (m) between its surveyed CRS position and where the fit puts it.

The small CSV readers at the top are shared with :mod:`slicer.geometry.positions` and
:mod:`slicer.geometry.channels` (this module depends on neither).
"""

from __future__ import annotations

import csv
import dataclasses
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.errors import InputFileError, SettingsError, warn
from slicer.io.linetable import LineEntry, decimal_point, table_delimiter, table_text

KINDS = ("similarity", "affine")
COLUMNS = ("name", "local_x", "local_y", "x", "y")
#: Fewest control points each fit needs.
MIN_POINTS = {"similarity": 2, "affine": 3}
#: Points closer together than this (m) count as one.
_COINCIDENT_M = 1e-6
#: Largest condition number of the centred, normalised local coordinates for an affine fit:
#: a point cloud 10,000 times longer than it is wide leaves the across scale undetermined.
_MAX_CONDITION = 1e4


@dataclass(frozen=True)
class ControlPoint:
    """A peg known in both the local grid and the survey CRS.

    Attributes
    ----------
    name : str
        The point's name.
    local : (float, float)
        ``(x, y)`` on the local grid (m).
    crs : (float, float)
        ``(x, y)`` = easting, northing in the survey CRS (m).
    where : str
        ``file:row`` for messages (empty when made in code).
    """

    name: str
    local: tuple[float, float]
    crs: tuple[float, float]
    where: str = ""


@dataclass(frozen=True)
class GridTransform:
    """A fitted plane transform ``(X, Y) = matrix @ (x, y) + shift`` from local to CRS metres.

    Attributes
    ----------
    kind : str
        ``"similarity"`` or ``"affine"``.
    matrix : ((float, float), (float, float))
        The linear part, rows for X and Y.
    shift : (float, float)
        Translation (m).
    residuals : tuple of float
        Per control point, distance (m) from its surveyed position to the fitted one.
    names : tuple of str
        Control point names, in the order of ``residuals``.
    """

    kind: str
    matrix: tuple[tuple[float, float], tuple[float, float]]
    shift: tuple[float, float]
    residuals: tuple[float, ...]
    names: tuple[str, ...] = ()

    def apply(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Map local ``(x, y)`` (m, scalars or arrays) to CRS easting and northing (m)."""
        x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
        (a, b), (c, d) = self.matrix
        return a * x + b * y + self.shift[0], c * x + d * y + self.shift[1]

    @property
    def rms(self) -> float:
        """Root-mean-square residual (m)."""
        return math.sqrt(sum(r * r for r in self.residuals) / len(self.residuals))

    @property
    def scale(self) -> float:
        """Scale factor (CRS m per local m); for an affine fit the areal mean sqrt(|det|)."""
        (a, b), (c, d) = self.matrix
        return math.sqrt(abs(a * d - b * c))

    @property
    def scale_x(self) -> float:
        """Length in the CRS of one local metre along local x."""
        return math.hypot(self.matrix[0][0], self.matrix[1][0])

    @property
    def scale_y(self) -> float:
        """Length in the CRS of one local metre along local y."""
        return math.hypot(self.matrix[0][1], self.matrix[1][1])

    @property
    def rotation_deg(self) -> float:
        """Direction of the local x axis in the CRS, degrees counter-clockwise from east."""
        return math.degrees(math.atan2(self.matrix[1][0], self.matrix[0][0]))

    @property
    def shear_deg(self) -> float:
        """How far the mapped local axes are from perpendicular (degrees; 0 for similarity)."""
        (a, b), (c, d) = self.matrix
        angle = math.degrees(math.atan2(a * d - b * c, a * b + c * d))
        return 90.0 - abs(angle)

    @property
    def mirrored(self) -> bool:
        """Whether the transform flips handedness (only an affine fit can)."""
        (a, b), (c, d) = self.matrix
        return a * d - b * c < 0

    def describe(self) -> str:
        """One line for records: kind, scale, rotation, rms."""
        extra = (f", scale x {self.scale_x:.6f}, y {self.scale_y:.6f}, shear "
                 f"{self.shear_deg:.4f} deg" if self.kind == "affine" else "")
        return (f"{self.kind} fit of {len(self.residuals)} control points: scale "
                f"{self.scale:.6f}, rotation {self.rotation_deg:.4f} deg{extra}, rms residual "
                f"{self.rms:.4f} m, largest {max(self.residuals):.4f} m")


# --- small CSV tables (shared with _positions and _channels) ---------------------------------


def _read_table(path: str | os.PathLike, what: str, columns: tuple[str, ...]
                ) -> tuple[Path, list[str], list[tuple[int, dict[str, str]]]]:
    """Read a headed CSV: (path, header, [(row number, fields)]), blank rows skipped.

    Raises InputFileError for a missing or unreadable file, no header or missing ``columns``.
    """
    path = Path(path)
    try:
        text = table_text(path)
    except FileNotFoundError:
        hint = " (a Windows path? separate folders with /)" if "\\" in str(path) else ""
        raise InputFileError(f"{what} not found{hint}", where=str(path)) from None
    except (OSError, ValueError) as exc:  # ValueError: undecodable, or a NUL in the path
        raise InputFileError(f"cannot read {what} ({exc})", where=str(path)) from None
    lines = text.splitlines()
    delimiter = table_delimiter(lines)
    reader = csv.DictReader(lines, delimiter=delimiter)
    try:
        named = [h.strip() for h in (reader.fieldnames or [])]
    except csv.Error as exc:
        raise InputFileError(f"not a readable CSV {what} ({exc})",
                             where=f"{path}:{reader.reader.line_num}") from None
    header = [h for h in named if h]  # an unnamed column (a spreadsheet's index) is skipped
    if not header:
        raise InputFileError(f"{what} is empty (no header row)", where=str(path))
    missing = [c for c in columns if c not in header]
    if missing:
        raise InputFileError(f"missing column(s) {', '.join(missing)} in {what}; header is "
                             f"{','.join(header)}", where=str(path))
    reader.fieldnames = named  # every column, unnamed ones too: nothing shifts
    rows = []
    try:
        records = list(reader)
    except csv.Error as exc:
        raise InputFileError(f"not a readable CSV {what} ({exc})",
                             where=f"{path}:{reader.reader.line_num}") from None
    for number, row in enumerate(records, start=2):
        if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
            continue
        if delimiter != ",":  # decimal commas with it
            row = {k: decimal_point(v) for k, v in row.items()}
        rows.append((number, {k: (v or "").strip() if isinstance(v, str) else ""
                              for k, v in row.items() if k}))
    return path, header, rows


def _float_field(fields: dict[str, str], column: str, where: str) -> float:
    """One finite number from a CSV row, or InputFileError naming ``where`` and the column."""
    text = fields.get(column, "")
    if not text:
        raise InputFileError(f"column {column} is empty", where=where)
    try:
        value = float(text)
    except ValueError:
        raise InputFileError(f"column {column}: {text!r} is not a number", where=where) from None
    if not math.isfinite(value):
        raise InputFileError(f"column {column}: {text!r} is not finite", where=where)
    return value


# --- fits ------------------------------------------------------------------------------------


def _pairs(local_xy, crs_xy, where: str) -> tuple[np.ndarray, np.ndarray]:
    local = np.asarray(local_xy, dtype=np.float64)
    crs = np.asarray(crs_xy, dtype=np.float64)
    if local.ndim != 2 or local.shape[1] != 2 or local.shape != crs.shape:
        raise SettingsError(f"control points must be two (n, 2) arrays of the same shape, got "
                            f"{local.shape} and {crs.shape}", where=where)
    if not (np.isfinite(local).all() and np.isfinite(crs).all()):
        raise SettingsError("control point coordinates must be finite", where=where)
    return local, crs


def _spread(points: np.ndarray) -> float:
    """RMS distance (m) of points from their centroid."""
    return float(np.sqrt(np.mean(np.sum((points - points.mean(axis=0)) ** 2, axis=1))))


def _transform(kind: str, matrix: np.ndarray, local: np.ndarray, crs: np.ndarray,
               names: Sequence[str] | None) -> GridTransform:
    shift = crs.mean(axis=0) - matrix @ local.mean(axis=0)
    fitted = local @ matrix.T + shift
    residuals = np.hypot(*(fitted - crs).T)
    m = tuple(tuple(float(v) for v in row) for row in matrix)
    return GridTransform(kind=kind, matrix=m, shift=(float(shift[0]), float(shift[1])),
                         residuals=tuple(float(r) for r in residuals),
                         names=tuple(names) if names is not None else ())


def fit_similarity(local_xy, crs_xy, *, names: Sequence[str] | None = None,
                   where: str = "control points") -> GridTransform:
    """Fit a 4-parameter similarity (2D Helmert) transform by linear least squares.

    ``X = a x - b y + tx``, ``Y = b x + a y + ty`` with ``a = s cos(r)``, ``b = s sin(r)``.

    Parameters
    ----------
    local_xy, crs_xy : array_like, shape (n, 2)
        The same points on the local grid and in the survey CRS (m), ``n >= 2``.
    names : sequence of str, optional
        Point names kept on the result.
    where : str
        Names the points' origin in errors.

    Returns
    -------
    GridTransform

    Raises
    ------
    SettingsError
        Fewer than two points, all local points (or all CRS points) coincident, or a rank-
        deficient system.
    """
    local, crs = _pairs(local_xy, crs_xy, where)
    if local.shape[0] < 2:
        raise SettingsError(f"a similarity fit needs at least 2 control points, got "
                            f"{local.shape[0]}", where=where)
    if _spread(local) < _COINCIDENT_M:
        raise SettingsError("the control points coincide on the local grid; a similarity fit "
                            "needs two distinct points", where=where)
    if _spread(crs) < _COINCIDENT_M:
        raise SettingsError("the control points coincide in the survey CRS; a similarity fit "
                            "needs two distinct points", where=where)
    p, q = local - local.mean(axis=0), crs - crs.mean(axis=0)
    n = p.shape[0]
    design = np.zeros((2 * n, 4))
    design[0::2] = np.column_stack([p[:, 0], -p[:, 1], np.ones(n), np.zeros(n)])
    design[1::2] = np.column_stack([p[:, 1], p[:, 0], np.zeros(n), np.ones(n)])
    solution, _, rank, _ = np.linalg.lstsq(design, q.reshape(-1), rcond=None)
    if rank < 4:
        raise SettingsError(f"the similarity system has rank {rank} of 4; the control points "
                            "do not determine the transform", where=where)
    a, b = solution[:2]
    return _transform("similarity", np.array([[a, -b], [b, a]]), local, crs, names)


def fit_affine(local_xy, crs_xy, *, names: Sequence[str] | None = None,
               where: str = "control points") -> GridTransform:
    """Fit a 6-parameter affine transform by linear least squares.

    ``X = a x + b y + tx``, ``Y = c x + d y + ty``.

    Parameters
    ----------
    local_xy, crs_xy : array_like, shape (n, 2)
        The same points on the local grid and in the survey CRS (m), ``n >= 3``, not all on
        one straight line.
    names : sequence of str, optional
        Point names kept on the result.
    where : str
        Names the points' origin in errors.

    Returns
    -------
    GridTransform

    Raises
    ------
    SettingsError
        Fewer than three points, coincident or (nearly) collinear local points, or CRS points
        that make the transform singular.
    """
    local, crs = _pairs(local_xy, crs_xy, where)
    if local.shape[0] < 3:
        raise SettingsError(f"an affine fit needs at least 3 control points, got "
                            f"{local.shape[0]}", where=where)
    spread = _spread(local)
    if spread < _COINCIDENT_M:
        raise SettingsError("the control points coincide on the local grid", where=where)
    p, q = local - local.mean(axis=0), crs - crs.mean(axis=0)
    normalised = p / spread
    if np.linalg.matrix_rank(normalised) < 2:
        raise SettingsError("the control points lie on one straight line on the local grid; "
                            "an affine fit needs three points not in line (or use a "
                            "similarity fit)", where=where)
    condition = float(np.linalg.cond(normalised))
    if condition > _MAX_CONDITION:
        raise SettingsError(f"the control points lie almost on one straight line on the local "
                            f"grid (condition number {condition:.3g}); an affine fit would be "
                            "unstable across it (use a similarity fit)", where=where)
    design = np.column_stack([normalised, np.ones(p.shape[0])])
    solution, _, rank, _ = np.linalg.lstsq(design, q, rcond=None)
    if rank < 3:
        raise SettingsError(f"the affine system has rank {rank} of 3 per axis", where=where)
    crs_spread = _spread(crs)
    if crs_spread < _COINCIDENT_M or np.linalg.cond(q / crs_spread) > _MAX_CONDITION:
        raise SettingsError("the control points coincide or lie (almost) on one straight line "
                            "in the survey CRS; the affine fit would be singular", where=where)
    matrix = solution[:2].T / spread
    return _transform("affine", matrix, local, crs, names)


def _as_point(item, i: int) -> ControlPoint:
    if isinstance(item, ControlPoint):
        return item
    try:
        name, lx, ly, x, y = item
        return ControlPoint(str(name), (float(lx), float(ly)), (float(x), float(y)))
    except (TypeError, ValueError):
        raise SettingsError(f"point {i + 1} is not a ControlPoint or (name, local_x, local_y, "
                            "x, y)", where="control points") from None


def _set_where(points: Sequence[ControlPoint]) -> str:
    files = {p.where.rsplit(":", 1)[0] for p in points if p.where}
    return files.pop() if len(files) == 1 else "control points"


def fit_control_points(points: Iterable, *, kind: str = "similarity",
                       tolerance: float = 0.05) -> GridTransform:
    """Fit the local-grid-to-CRS transform and refuse it if any point misses by too much.

    Parameters
    ----------
    points : iterable of ControlPoint or (name, local_x, local_y, x, y)
        The control points (m), e.g. from :func:`read_control_points`.
    kind : {"similarity", "affine"}
        Similarity (4 parameters, shape kept) or affine (6 parameters).
    tolerance : float
        Largest residual accepted (m).

    Returns
    -------
    GridTransform
        With one residual per point, in the order given.

    Raises
    ------
    SettingsError
        A bad ``kind`` or ``tolerance``; too few, duplicate, coincident or collinear points;
        or a residual above ``tolerance`` (naming the worst point and its row).
    """
    if kind not in KINDS:
        raise SettingsError(f"must be one of {', '.join(KINDS)}, got {kind!r}", where="kind")
    try:
        tolerance = float(tolerance)
    except (TypeError, ValueError):
        tolerance = math.nan
    if not (math.isfinite(tolerance) and tolerance > 0):
        raise SettingsError(f"must be a positive length in m, got {tolerance!r}",
                            where="tolerance")
    points = [_as_point(p, i) for i, p in enumerate(points)]
    where = _set_where(points)
    if len(points) < MIN_POINTS[kind]:
        raise SettingsError(f"a {kind} fit needs at least {MIN_POINTS[kind]} control points, "
                            f"got {len(points)}", where=where)
    seen: dict[str, ControlPoint] = {}
    for p in points:
        if p.name in seen:
            raise SettingsError(f"control point {p.name!r} is given twice", where=p.where or where)
        seen[p.name] = p
    fit = fit_similarity if kind == "similarity" else fit_affine
    local, crs = np.array([p.local for p in points]), np.array([p.crs for p in points])
    transform = fit(local, crs, names=[p.name for p in points], where=where)
    if len(points) == MIN_POINTS[kind]:
        warn(f"{where}: {len(points)} control points exactly determine a {kind} fit, so every "
             "residual is zero and a wrong point cannot show; survey one more")
    if transform.mirrored:
        warn(f"{where}: the affine fit mirrors the local grid (its axes are left-handed); "
             "check the sign of local_x or local_y")
    worst = int(np.argmax(transform.residuals))
    if transform.residuals[worst] > tolerance:
        hint = ""
        if kind == "similarity" and len(points) >= 3:
            try:
                if fit_affine(local, crs, where=where).mirrored:
                    hint = ("; the local grid looks mirrored (left-handed), flip the sign of "
                            "local_x or local_y")
            except SettingsError:
                pass
        p = points[worst]
        raise SettingsError(
            f"control point {p.name!r} misses its surveyed position by "
            f"{transform.residuals[worst]:.3f} m after the {kind} fit (tolerance "
            f"{tolerance:g} m; rms {transform.rms:.3f} m over {len(points)} points); check its "
            f"coordinates{hint}", where=p.where or where)
    return transform


def read_control_points(path: str | os.PathLike) -> list[ControlPoint]:
    """Read control points from a CSV with header ``name,local_x,local_y,x,y`` (m).

    Parameters
    ----------
    path : path-like
        The control point table.

    Returns
    -------
    list of ControlPoint
        One per row, in file order, each with its ``file:row`` as ``where``.

    Raises
    ------
    InputFileError
        Missing file or columns, no points, an empty name, a duplicate name or an empty or
        non-numeric coordinate (naming ``file:row``).
    """
    path, _, rows = _read_table(path, "control point table", COLUMNS)
    points: list[ControlPoint] = []
    seen: dict[str, str] = {}
    for number, fields in rows:
        where = f"{path}:{number}"
        name = fields.get("name", "")
        if not name:
            raise InputFileError("column name is empty", where=where)
        if name in seen:
            raise InputFileError(f"control point {name!r} is already given at {seen[name]}",
                                 where=where)
        seen[name] = where
        lx, ly, x, y = (_float_field(fields, c, where) for c in COLUMNS[1:])
        points.append(ControlPoint(name, (lx, ly), (x, y), where))
    if not points:
        raise InputFileError("control point table has no points", where=str(path))
    return points


def transform_entries(entries: Iterable[LineEntry], transform: GridTransform) -> list[LineEntry]:
    """Map every line's start and end from local-grid to CRS coordinates (m).

    Returns new :class:`LineEntry` objects (``dataclasses.replace``); file and ``where`` stay.
    """
    out = []
    for entry in entries:
        (sx, sy), (ex, ey) = (transform.apply(*p) for p in (entry.start, entry.end))
        out.append(dataclasses.replace(entry, start=(float(sx), float(sy)),
                                       end=(float(ex), float(ey))))
    return out
