"""Survey planning: the numbers a radar survey is designed around, each with its source.

Given the antenna's centre frequency, the ground's relative permittivity (or velocity) and
conductivity, and the deepest target, :func:`plan_survey` works out the wavelength, vertical and
horizontal resolution, the antenna footprint, the largest trace spacing, line spacing and sample
interval, the time window and the attenuation. Velocity and wavelength are those of a low-loss
medium (``v = c / sqrt(er)``); the attenuation is given both by its low-loss approximation and
by the exact formula of a uniform medium with constant permittivity and conductivity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import scipy.constants

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.core.physics import check_velocity, velocity_from_permittivity

#: Loss tangent above which the low-loss attenuation is flagged as unreliable (common practice:
#: the approximation needs ``sigma / (omega eps)`` well below 1).
LOSS_TANGENT_LIMIT = 0.1

#: Radar frequencies outside this range (MHz) are flagged (common practice: GPR works from
#: about 10 MHz to a few GHz).
FREQUENCY_RANGE_MHZ = (10.0, 5000.0)

#: Frequencies outside this range (MHz) are refused: a unit slip (Hz or GHz for MHz), not
#: an antenna.
UNIT_SLIP_MHZ = (1.0, 100_000.0)

_NEPER_TO_DB = 20.0 / math.log(10.0)

#: field -> (quantity, unit, source), in table order.
ROWS = {
    "frequency_mhz": ("antenna centre frequency", "MHz", "given"),
    "permittivity": ("relative permittivity", "-", "given, or (c / v)^2"),
    "velocity": ("radar velocity", "m/ns",
                 "given, or c / sqrt(er) (Davis & Annan 1989, Geophys. Prosp. 37:531)"),
    "wavelength_m": ("wavelength in the ground", "m", "v / f"),
    "vertical_resolution_m": ("vertical resolution", "m",
                              "lambda / 4, common practice (Jol (ed.) 2009, Ground Penetrating "
                              "Radar Theory and Applications)"),
    "fresnel_radius_m": ("first Fresnel zone radius at target depth", "m",
                         "sqrt(lambda z / 2 + lambda^2 / 16) (Sheriff & Geldart 1995, "
                         "Exploration Seismology)"),
    "footprint_long_m": ("antenna footprint long axis at target depth", "m",
                         "lambda / 4 + z / sqrt(er - 1) (Annan 1996, in Martinez & Byrnes "
                         "2001, KGS Bulletin 247)"),
    "footprint_short_m": ("antenna footprint short axis at target depth", "m",
                          "half the long axis (Annan 1996, in Martinez & Byrnes 2001)"),
    "trace_spacing_m": ("largest along-line trace spacing", "m",
                        "c / (4 f sqrt(er)) = lambda / 4 (Annan 2009, in Jol (ed.) 2009)"),
    "line_spacing_m": ("suggested line spacing", "m",
                       "smaller of half the target size and the footprint short axis: two "
                       "lines cross every target and footprints meet at its depth (common "
                       "practice)"),
    "sample_interval_ns": ("largest sample interval", "ns",
                           "1 / (6 f) (Annan 2009, in Jol (ed.) 2009)"),
    "time_window_ns": ("time window", "ns", "1.3 x 2 d_max / v (Annan 2009, in Jol (ed.) 2009)"),
    "conductivity_ms_per_m": ("conductivity", "mS/m", "given"),
    "loss_tangent": ("loss tangent sigma / (omega eps)", "-",
                     "low-loss approximation needs it well below 1"),
    "attenuation_low_loss_db_per_m": ("attenuation, low-loss approximation", "dB/m",
                                      "1636 sigma / sqrt(er), sigma in S/m (Annan 2009)"),
    "attenuation_db_per_m": ("attenuation, exact for a uniform medium", "dB/m",
                             "omega sqrt(mu eps / 2) sqrt(sqrt(1 + (sigma / omega eps)^2) - 1) "
                             "(plane wave in a lossy medium; Griffiths 1999, "
                             "Introduction to Electrodynamics, eq. 9.126)"),
    "two_way_loss_db": ("two-way attenuation loss to target depth", "dB",
                        "2 z x exact attenuation (spreading and reflection losses excluded)"),
}


@dataclass(frozen=True)
class SurveyPlan:
    """Survey design numbers; ``warnings`` lists what the user should reconsider.

    Every field is documented with its unit and source in :data:`ROWS`; depths used are the
    target depth ``target_depth_m`` (m below the surface).
    """

    frequency_mhz: float
    permittivity: float
    velocity: float
    target_depth_m: float
    target_size_m: float | None
    wavelength_m: float
    vertical_resolution_m: float
    fresnel_radius_m: float
    footprint_long_m: float
    footprint_short_m: float
    trace_spacing_m: float
    line_spacing_m: float
    sample_interval_ns: float
    time_window_ns: float
    conductivity_ms_per_m: float
    loss_tangent: float
    attenuation_low_loss_db_per_m: float
    attenuation_db_per_m: float
    two_way_loss_db: float
    warnings: tuple[str, ...] = ()

    def as_table(self) -> list[tuple[str, float, str, str]]:
        """Rows ``(quantity, value, unit, source)`` in a reading order."""
        return [(label, getattr(self, name), unit, source)
                for name, (label, unit, source) in ROWS.items()]


def _number(value, where: str, *, positive: bool = True) -> float:
    try:
        if isinstance(value, bool):
            raise TypeError
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"expected a number, got {value!r}", where=where) from None
    if not math.isfinite(v) or v < 0 or (positive and v == 0):
        raise SettingsError(f"must be {'positive' if positive else '>= 0'} and finite, got "
                            f"{v:g}", where=where)
    return v


def attenuation_db_per_m(*, frequency_mhz: float, permittivity: float,
                         conductivity_ms_per_m: float) -> tuple[float, float, float]:
    """Attenuation of a plane wave in a uniform lossy medium (``mu = mu0``).

    Returns
    -------
    low_loss, exact : float
        dB/m: ``(sigma / 2) sqrt(mu0 / (eps0 er))`` converted to dB (``1636 sigma / sqrt(er)``,
        sigma in S/m), and ``omega sqrt(mu eps / 2) sqrt(sqrt(1 + p^2) - 1)``.
    loss_tangent : float
        ``p = sigma / (omega eps)``.
    """
    sigma = conductivity_ms_per_m * 1e-3
    omega = 2.0 * math.pi * frequency_mhz * 1e6
    eps = permittivity * scipy.constants.epsilon_0
    mu = scipy.constants.mu_0
    p = sigma / (omega * eps)
    low = 0.5 * sigma * math.sqrt(mu / eps) * _NEPER_TO_DB
    # sqrt(1 + p^2) - 1 written as p^2 / (sqrt(1 + p^2) + 1): no cancellation for small p
    exact = omega * math.sqrt(mu * eps / 2.0) * math.sqrt(p * p / (math.hypot(1.0, p) + 1.0))
    return low, exact * _NEPER_TO_DB, p


def plan_survey(*, frequency_mhz: float, permittivity: float | None = None,
                velocity: float | None = None, conductivity_ms_per_m: float = 0.0,
                target_depth_m: float, target_size_m: float | None = None) -> SurveyPlan:
    """Work out a survey's design numbers, each with its source (see :data:`ROWS`).

    Parameters
    ----------
    frequency_mhz : float
        Antenna centre frequency (MHz).
    permittivity, velocity : float
        Relative permittivity of the ground (> 1) or its radar velocity (m/ns); give one.
    conductivity_ms_per_m : float
        Electrical conductivity (mS/m, >= 0).
    target_depth_m : float
        Depth of the deepest target (m below the surface): the footprint, Fresnel zone and
        losses are given there, and the time window reaches it.
    target_size_m : float, optional
        Smallest target's plan size (m); it caps the line spacing at half of it.

    Raises
    ------
    SettingsError
        Naming the option (``--frequency``, ``--permittivity``, ``--velocity``,
        ``--conductivity``, ``--target-depth``, ``--target-size``) of an impossible input.
    """
    f_mhz = _number(frequency_mhz, "--frequency")
    if not UNIT_SLIP_MHZ[0] <= f_mhz <= UNIT_SLIP_MHZ[1]:  # Hz or GHz given for MHz
        raise SettingsError(f"{f_mhz:g} MHz is no radar's frequency; give it in MHz (400 for "
                            "a 400 MHz antenna, not 4e8 Hz or 0.4 GHz)", where="--frequency")
    if (permittivity is None) == (velocity is None):
        raise SettingsError("give the ground's relative permittivity or its velocity (one)",
                            where="--permittivity" if permittivity is None else "--velocity")
    if permittivity is not None:
        v = velocity_from_permittivity(permittivity, where="--permittivity")
        er = float(permittivity)
    else:
        v = check_velocity(velocity, where="--velocity")
        er = (C_M_PER_NS / v) ** 2
    sigma = _number(conductivity_ms_per_m, "--conductivity", positive=False)
    z = _number(target_depth_m, "--target-depth")
    size = None if target_size_m is None else _number(target_size_m, "--target-size")

    f_ghz = f_mhz / 1000.0  # m/ns over GHz gives metres
    lam = v / f_ghz
    footprint = lam / 4.0 + z / math.sqrt(er - 1.0)
    low, exact, p = attenuation_db_per_m(frequency_mhz=f_mhz, permittivity=er,
                                         conductivity_ms_per_m=sigma)
    notes = []
    lo, hi = FREQUENCY_RANGE_MHZ
    if not lo <= f_mhz <= hi:
        notes.append(f"{f_mhz:g} MHz is outside the usual radar range {lo:g}-{hi:g} MHz")
    if p > LOSS_TANGENT_LIMIT:
        notes.append(f"loss tangent {p:.2g} > {LOSS_TANGENT_LIMIT:g}: the low-loss attenuation "
                     f"({low:.3g} dB/m) is unreliable, use the exact value ({exact:.3g} dB/m); "
                     "velocity and wavelength are low-loss values too")
    return SurveyPlan(
        frequency_mhz=f_mhz, permittivity=er, velocity=v, target_depth_m=z, target_size_m=size,
        wavelength_m=lam, vertical_resolution_m=lam / 4.0,
        fresnel_radius_m=math.sqrt(lam * z / 2.0 + lam * lam / 16.0),
        footprint_long_m=footprint, footprint_short_m=footprint / 2.0,
        trace_spacing_m=C_M_PER_NS / (4.0 * f_ghz * math.sqrt(er)),
        line_spacing_m=footprint / 2.0 if size is None else min(size / 2.0, footprint / 2.0),
        sample_interval_ns=1.0 / (6.0 * f_ghz), time_window_ns=1.3 * 2.0 * z / v,
        conductivity_ms_per_m=sigma, loss_tangent=p, attenuation_low_loss_db_per_m=low,
        attenuation_db_per_m=exact, two_way_loss_db=2.0 * z * exact, warnings=tuple(notes))
