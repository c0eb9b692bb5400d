"""Uneven ground for synthetic surveys: ground-surface models and the :class:`Ground` that holds
the targets.

A surface model gives the elevation of the ground, in metres above a vertical datum (a named
level plane, recorded by :func:`slicer.synthetic.write_survey`), at any plan position:
:class:`Slope` (a tilted plane) and :class:`Mound` (a smooth bump on a level base).

On uneven ground every target and layer sits at an absolute elevation.  Their ``depth`` is then
measured down from a level plane, the ground's ``reference_elevation``, not from the surface:
a reflector lies at ``elevation = reference_elevation - depth`` (for a target, the elevation of
its top), and a trace at ``(x, y)`` sees it ``surface.elevation(x, y) - elevation`` below the
antenna.

Approximations of the forward model on uneven ground:

* the antennas stand on the surface (no air gap) and the radar record starts there, so the
  direct wave is unchanged and every travel time is counted from the antenna;
* rays are straight, at one velocity, with no refraction or reflection at the sloping surface:
  a point or line target is seen along the straight slant range from ``(x, y, surface)`` to its
  nearest point, a level layer or plate at normal incidence (vertically) ``2 (surface - z) / v``;
* the antenna pattern is taken about the vertical, as if the antenna were held level on the
  slope rather than tilted with it;
* a reflector whose top is level with or above the antenna is not seen from it (amplitude 0),
  so a layer that crops out vanishes where the ground falls below it.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import ClassVar

import numpy as np

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.synthetic.forward import (
    Layer,
    LineTarget,
    PlateTarget,
    PointTarget,
    arrivals,
    check_fields,
    check_number,
)

__all__ = ["Ground", "Mound", "Slope", "Surface"]

Target = PointTarget | LineTarget | PlateTarget


class Surface:
    """Base of the ground-surface models: a frozen dataclass with a ``kind`` and
    :meth:`elevation`.

    A new model subclasses it as a frozen dataclass of float fields; :meth:`describe` records
    those fields in ``truth.json``.
    """

    kind: ClassVar[str] = "surface"

    def elevation(self, x, y) -> np.ndarray:
        """Ground elevation at plan positions ``(x, y)`` (survey CRS, m), m above the datum.

        ``x`` and ``y`` broadcast; the result is float64 of their broadcast shape.
        """
        raise NotImplementedError

    def describe(self) -> dict:
        """The model's kind and parameters, for ``truth.json``."""
        return {"kind": self.kind, **asdict(self)}


def _xy(x, y) -> tuple[np.ndarray, np.ndarray]:
    return np.asarray(x, dtype=float), np.asarray(y, dtype=float)


@dataclass(frozen=True)
class Slope(Surface):
    """A plane ground surface: an elevation at a reference point and a gradient in x and y.

    ``elevation(x, y) = z0 + gradient_x (x - x0) + gradient_y (y - y0)``.

    Parameters
    ----------
    x0, y0 : float
        Reference point, survey CRS, m.
    z0 : float
        Ground elevation at the reference point, m above the datum.
    gradient_x, gradient_y : float
        Rise per metre towards +x (east) and +y (north), m/m (0.1 is a 10 % slope).
    """

    x0: float
    y0: float
    z0: float
    gradient_x: float = 0.0
    gradient_y: float = 0.0
    kind: ClassVar[str] = "slope"

    def __post_init__(self):
        check_fields(self)

    def elevation(self, x, y) -> np.ndarray:
        """Ground elevation at ``(x, y)`` (m, broadcast), m above the datum."""
        x, y = _xy(x, y)
        return self.z0 + self.gradient_x * (x - self.x0) + self.gradient_y * (y - self.y0)

    @property
    def grade(self) -> float:
        """Steepest rise per metre, ``hypot(gradient_x, gradient_y)``, m/m."""
        return math.hypot(self.gradient_x, self.gradient_y)


@dataclass(frozen=True)
class Mound(Surface):
    """A smooth round bump (or, with a negative ``height``, a hollow) on a level base.

    ``elevation(x, y) = base + height exp(-r^2 / (2 radius^2))`` with ``r`` the plan distance
    from ``(x0, y0)``: a Gaussian bump, ``height`` above the base at its centre and
    ``exp(-1/2)`` (0.61) of that at ``radius``.

    Parameters
    ----------
    x0, y0 : float
        Centre of the bump, survey CRS, m.
    base : float
        Elevation of the level ground far from the bump, m above the datum.
    height : float
        Rise of the bump's centre above the base, m.
    radius : float
        Width of the bump (the Gaussian's standard deviation), m, positive.
    """

    x0: float
    y0: float
    base: float
    height: float
    radius: float
    kind: ClassVar[str] = "mound"

    def __post_init__(self):
        check_fields(self, positive=("radius",))

    def elevation(self, x, y) -> np.ndarray:
        """Ground elevation at ``(x, y)`` (m, broadcast), m above the datum."""
        x, y = _xy(x, y)
        r2 = (x - self.x0) ** 2 + (y - self.y0) ** 2
        return self.base + self.height * np.exp(-r2 / (2.0 * self.radius ** 2))


@dataclass(frozen=True)
class Ground:
    """Homogeneous ground holding targets and flat layers, level or with a surface model.

    Parameters
    ----------
    velocity : float
        Radar velocity, m/ns (0 < v <= c).
    attenuation_db_per_m : float
        Amplitude loss per metre of travel path, dB/m.
    targets : tuple of PointTarget, LineTarget, PlateTarget
    layers : tuple of Layer
    surface : Surface, optional
        The ground surface (:class:`Slope`, :class:`Mound`...).  Without it the ground is level
        and every ``depth`` is measured down from the surface.
    reference_elevation : float, optional
        With a surface (and only then, where it is required): the level plane, m above the
        datum, that every target's and layer's ``depth`` is measured down from, so that each
        sits at the absolute elevation ``reference_elevation - depth``.  See the module
        docstring for what the model assumes.
    """

    velocity: float = 0.1
    attenuation_db_per_m: float = 2.0
    targets: tuple[Target, ...] = ()
    layers: tuple[Layer, ...] = ()
    surface: Surface | None = None
    reference_elevation: float | None = None

    def __post_init__(self):
        check_fields(self, positive=("velocity",), nonnegative=("attenuation_db_per_m",))
        if self.velocity > C_M_PER_NS:
            raise SettingsError(f"{self.velocity} m/ns exceeds the speed of light "
                                f"({C_M_PER_NS} m/ns)", where="Ground.velocity")
        object.__setattr__(self, "targets", tuple(self.targets))
        object.__setattr__(self, "layers", tuple(self.layers))
        for name, kinds in (("targets", PointTarget | LineTarget | PlateTarget),
                            ("layers", Layer)):
            for i, item in enumerate(getattr(self, name)):
                if not isinstance(item, kinds):
                    raise SettingsError(f"not a target or layer: {type(item).__name__}",
                                        where=f"Ground.{name}[{i}]")
        if self.surface is not None and not isinstance(self.surface, Surface):
            raise SettingsError(f"not a surface model: {type(self.surface).__name__}",
                                where="Ground.surface")
        if (self.surface is None) != (self.reference_elevation is None):
            raise SettingsError("give it together with a surface (depths are then measured "
                                "down from it), and only then", where="Ground.reference_elevation")
        if self.surface is not None:
            check_number("Ground.reference_elevation", self.reference_elevation)

    def elevation_of(self, item: Target | Layer) -> float:
        """Absolute elevation of a layer or of a target's top, m above the datum.

        Raises
        ------
        SettingsError
            The ground has no surface (depths are then below the surface, not a datum).
        """
        if self.reference_elevation is None:
            raise SettingsError("level ground without a surface has no elevations",
                                where="Ground.surface")
        return float(self.reference_elevation - item.depth)

    def arrivals(self, x, y, *, pattern_exponent: float = 2.0) -> tuple[np.ndarray, np.ndarray]:
        """Two-way time (ns) and amplitude of every reflector on traces at ``(x, y)`` (m).

        On a surface the antenna at ``(x, y)`` stands ``surface(x, y) - reference_elevation``
        above the plane depths are measured from; see :func:`slicer.synthetic.forward.arrivals`
        for the shapes and ``pattern_exponent``.
        """
        x, y = _xy(x, y)
        shift = (None if self.surface is None
                 else self.surface.elevation(x, y) - self.reference_elevation)
        return arrivals(x, y, self.targets, self.layers, velocity=self.velocity,
                        attenuation_db_per_m=self.attenuation_db_per_m,
                        pattern_exponent=pattern_exponent, depth_shift=shift)
