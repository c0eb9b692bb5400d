"""A small 2-D TM (Ez, Hx, Hy) finite-difference time-domain solver, for the tests only.

It is the independent full-wave reference of ``tests/fullwave``: nothing here comes from
slicer or its point-scatterer forward model (``slicer.synthetic``).

Method
------
- Yee (1966), IEEE Trans. Antennas Propag. 14:302-307: staggered grid, leapfrog in time.
  ``Ez`` lives on the nodes ``(i, j) * cell``, ``Hx`` on ``(i, j + 1/2)``, ``Hy`` on
  ``(i + 1/2, j)``; ``Ez`` at integer time steps ``n * dt``, ``H`` at ``(n + 1/2) * dt``.
- Lossy dielectric update (per-node ``Ca``, ``Cb``): Taflove & Hagness, *Computational
  Electrodynamics*, 3rd ed. (2005), eqs. 3.57-3.58 (2-D TMz form of 3.29).
- Courant limit ``dt <= cell / (c sqrt(2))`` for square 2-D cells: Taflove & Hagness eq. 4.66
  (from the Yee dispersion relation, eq. 4.62 in 2-D).
- Absorbing boundary: convolutional PML (CPML) of Roden & Gedney (2000), Microw. Opt. Technol.
  Lett. 27:334-339, recursive-convolution form as in Taflove & Hagness sec. 7.9.1 (eqs.
  7.102-7.114), graded polynomially (eqs. 7.60a,b for sigma and kappa; alpha graded linearly,
  largest at the inner face, eq. 7.79), sigma_max from the optimum of eq. 7.67.
- Perfect electric conductor (PEC): ``Ez`` held at 0 on the PEC nodes (Ca = Cb = 0), and the
  outer wall of the grid (behind the CPML) is PEC.
- Sources: a *soft* line current (``Jz`` in Ampere's law, one node, current in A), or a *hard*
  source that sets ``Ez`` at a node (V/m).

Equation and section numbers of the cited books are from memory.

Coordinates: ``x`` along the grid's first axis (index ``i``), ``y`` along the second (index
``j``), both in m from the first node of the whole grid (CPML included); the survey scripts
take ``y`` as depth, positive down. ``z`` (out of plane) is the direction of ``Ez`` and of
the axes of buried cylinders.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: Physical constants (SI; CODATA 2018: c exact, mu0 to 1e-10).
C0 = 299_792_458.0  # m/s
MU0 = 1.25663706212e-6  # H/m
EPS0 = 1.0 / (MU0 * C0**2)  # F/m
ETA0 = MU0 * C0  # ohm


def ricker(t_s, *, frequency_hz: float, delay_s: float) -> np.ndarray:
    """Ricker wavelet (the negative normalised second derivative of a Gaussian).

    ``w(t) = (1 - 2 (pi f (t - t0))^2) exp(-(pi f (t - t0))^2)``, peak 1 at ``t0``; its
    amplitude spectrum peaks at ``f`` (Ricker 1953, Geophysics 18:10-40).

    Parameters
    ----------
    t_s : array_like
        Times, s.
    frequency_hz : float
        Peak frequency of the spectrum, Hz.
    delay_s : float
        Time of the central peak, s.
    """
    a = (math.pi * frequency_hz * (np.asarray(t_s, dtype=float) - delay_s)) ** 2
    return (1.0 - 2.0 * a) * np.exp(-a)


def courant_dt(cell_m: float, *, courant: float = 0.99) -> float:
    """Time step, s: ``courant`` times the 2-D Yee limit ``cell / (c sqrt(2))`` (T&H eq. 4.66)."""
    return courant * cell_m / (C0 * math.sqrt(2.0))


def yee_phase_velocity(frequency_hz: float, *, cell: float, dt: float, velocity: float,
                       angle: float = 0.0) -> float:
    """Phase velocity of the 2-D Yee scheme on square cells, m/s.

    Solves the numerical dispersion relation ``[sin(w dt / 2) / (v dt)]^2 = [sin(kx d / 2) /
    d]^2 + [sin(ky d / 2) / d]^2`` (Taflove & Hagness 3rd ed. eq. 4.62) for ``k`` along
    ``angle`` and returns ``w / k``.

    Parameters
    ----------
    frequency_hz : float
        Frequency, Hz.
    cell, dt : float
        Cell size (m) and time step (s).
    velocity : float
        Physical velocity of the medium, m/s.
    angle : float
        Direction of propagation from the x axis, radians.
    """
    from scipy.optimize import brentq

    w = 2 * math.pi * frequency_hz
    lhs = (math.sin(w * dt / 2) / (velocity * dt)) ** 2

    def mismatch(k):
        return ((math.sin(k * math.cos(angle) * cell / 2) / cell) ** 2
                + (math.sin(k * math.sin(angle) * cell / 2) / cell) ** 2 - lhs)

    return w / brentq(mismatch, 0.5 * w / velocity, 2.0 * w / velocity)


@dataclass
class Source:
    """A line source at one ``Ez`` node.

    Attributes
    ----------
    i, j : int or array of int
        Node indices (x, y); arrays make a row of sources driven alike (e.g. a current sheet).
    waveform : numpy.ndarray
        One value per time step. Soft: the line current in A at ``(n + 1/2) dt`` (per node);
        hard: ``Ez`` in V/m at ``(n + 1) dt``.
    hard : bool
        Hard (``Ez`` set) rather than soft (current added).
    """

    i: int | np.ndarray
    j: int | np.ndarray
    waveform: np.ndarray
    hard: bool = False


@dataclass
class Model:
    """Materials of a 2-D grid of square cells, per ``Ez`` node.

    Attributes
    ----------
    cell : float
        Cell size, m (same in x and y).
    eps_r : numpy.ndarray
        Relative permittivity, shape ``(nx, ny)``.
    sigma : numpy.ndarray
        Conductivity, S/m, shape ``(nx, ny)``.
    pec : numpy.ndarray
        Boolean mask of perfect-conductor nodes, shape ``(nx, ny)``.
    pml : int
        CPML thickness, cells, on every side (inside the ``(nx, ny)`` grid).
    periodic_x : bool
        Periodic along x instead (no CPML there): nodes ``1 .. nx - 2`` repeat, nodes ``0`` and
        ``nx - 1`` are ghost copies of ``nx - 2`` and ``1``. A current sheet along x then makes
        an exact plane wave travelling along y.
    """

    cell: float
    eps_r: np.ndarray
    sigma: np.ndarray
    pec: np.ndarray = field(default=None)
    pml: int = 10
    periodic_x: bool = False

    def __post_init__(self):
        self.eps_r = np.asarray(self.eps_r, dtype=float)
        self.sigma = np.broadcast_to(np.asarray(self.sigma, dtype=float), self.eps_r.shape).copy()
        if self.pec is None:
            self.pec = np.zeros(self.eps_r.shape, dtype=bool)
        if self.eps_r.ndim != 2 or self.eps_r.shape[1] <= 2 * self.pml + 2 or (
                self.eps_r.shape[0] <= (2 if self.periodic_x else 2 * self.pml + 2)):
            raise ValueError("eps_r must be 2-D and larger than the two CPML layers")

    @property
    def shape(self) -> tuple[int, int]:
        """``(nx, ny)``, nodes."""
        return self.eps_r.shape


def homogeneous(nx: int, ny: int, *, cell: float, eps_r: float = 1.0, sigma: float = 0.0,
                pml: int = 10) -> Model:
    """A uniform :class:`Model` of ``nx`` by ``ny`` nodes (cell in m, sigma in S/m)."""
    return Model(cell, np.full((nx, ny), float(eps_r)), np.full((nx, ny), float(sigma)),
                 pml=pml)


def _profiles(n_nodes: int, pml: int, cell: float, *, eps_ref: float, order: float = 3.0,
              kappa_max: float = 2.0, alpha_max: float = 0.01):
    """CPML coefficient profiles along one axis, for the nodes and the half nodes.

    Returns ``[(sigma, kappa, alpha), (sigma, kappa, alpha)]`` (sigma and alpha in S/m) for the
    integer positions (length ``n_nodes``) and for the half-integer positions ``k + 1/2``
    (length ``n_nodes - 1``). Depth ``rho`` into the layer is measured from
    its inner face (node ``pml`` and ``n_nodes - 1 - pml``) to the outer PEC wall.
    sigma: T&H eq. 7.60a with sigma_max = 0.8 (m + 1) / (eta0 cell sqrt(eps_ref)) (eq. 7.67);
    kappa: eq. 7.60b; alpha (S/m): linear, alpha_max at the inner face, 0 at the wall (eq. 7.79).
    b, c: Roden & Gedney (2000) eqs. 10-11 (T&H eqs. 7.102a,b, 7.114).
    """
    sigma_max = 0.8 * (order + 1.0) / (ETA0 * cell * math.sqrt(eps_ref))

    def depth(pos):
        inner_lo, inner_hi = pml, n_nodes - 1 - pml
        d = np.maximum(inner_lo - pos, 0.0) + np.maximum(pos - inner_hi, 0.0)
        return np.clip(d / pml, 0.0, 1.0)

    out = []
    for pos in (np.arange(n_nodes, dtype=float), np.arange(n_nodes - 1, dtype=float) + 0.5):
        r = depth(pos)
        sig = sigma_max * r**order
        kap = 1.0 + (kappa_max - 1.0) * r**order
        alp = np.where(r > 0, alpha_max * (1.0 - r), 0.0)
        out.append((sig, kap, alp))
    return out


def _cpml_bc(sig, kap, alp, dt):
    """Recursive-convolution coefficients b, c (Roden & Gedney 2000 eqs. 10-11)."""
    b = np.exp(-(sig / kap + alp) * dt / EPS0)
    denom = sig * kap + kap**2 * alp
    c = np.where(denom > 0, sig / np.where(denom > 0, denom, 1.0) * (b - 1.0), 0.0)
    return b, c


class _Slabs:
    """CPML auxiliary fields (psi) on the two slabs of one axis of one field derivative."""

    def __init__(self, b, c, pml: int, other: int, axis: int, dtype, *, off: bool = False):
        n = b.size
        self.axis = axis
        self.parts = []
        for sl in () if off else (slice(0, pml + 1), slice(n - pml - 1, n)):
            shape = [other, other]
            shape[axis] = sl.stop - sl.start
            bb, cc = b[sl], c[sl]
            if axis == 0:
                bb, cc = bb[:, None], cc[:, None]
            self.parts.append((sl, bb.astype(dtype), cc.astype(dtype),
                               np.zeros(shape, dtype=dtype)))

    def update(self, derivative: np.ndarray) -> list:
        """Advance psi by one step with ``derivative`` (full array); return [(slice, psi)]."""
        result = []
        for sl, b, c, psi in self.parts:
            d = derivative[sl] if self.axis == 0 else derivative[:, sl]
            psi *= b
            psi += c * d
            result.append((sl, psi))
        return result


def simulate(model: Model, *, steps: int, sources, receivers, dt: float | None = None,
             dtype=np.float32) -> np.ndarray:
    """Run the FDTD scheme and record ``Ez`` at the receivers.

    Parameters
    ----------
    model : Model
        Grid and materials (cell in m, eps_r, sigma in S/m, PEC mask, CPML thickness).
    steps : int
        Number of time steps.
    sources : sequence of Source
        Line sources (soft currents in A, or hard Ez in V/m), one value per step.
    receivers : sequence of (int, int)
        ``Ez`` nodes to record.
    dt : float, optional
        Time step, s; default :func:`courant_dt` (0.99 of the Courant limit).
    dtype : numpy dtype
        Field precision.

    Returns
    -------
    numpy.ndarray
        ``Ez`` (V/m), shape ``(len(receivers), steps + 1)``: sample ``n`` at time ``n * dt``
        (sample 0 is the quiet initial state).
    """
    cell = model.cell
    dt = courant_dt(cell) if dt is None else float(dt)
    if dt > courant_dt(cell, courant=1.0) * (1 + 1e-12):
        raise ValueError(f"dt {dt:g} s exceeds the Courant limit {courant_dt(cell, courant=1):g}")
    nx, ny = model.shape
    pml = model.pml
    eps = model.eps_r * EPS0
    loss = model.sigma * dt / (2.0 * eps)
    # T&H eqs. 3.57-3.58: Ca = (1 - s dt / 2e) / (1 + s dt / 2e), Cb = (dt / e) / (1 + s dt / 2e)
    ca = ((1.0 - loss) / (1.0 + loss))
    cb = ((dt / eps) / (1.0 + loss))
    ca[model.pec] = 0.0
    cb[model.pec] = 0.0
    ca = ca[1:-1, 1:-1].astype(dtype)
    cb_full = cb
    cb_in = (cb[1:-1, 1:-1] / cell).astype(dtype)

    periodic = model.periodic_x
    # sigma_max is optimal for one permittivity (T&H eq. 7.67); with air over ground in the
    # layer, their geometric mean keeps both within a factor sqrt(eps_max / eps_min)
    eps_in = model.eps_r[slice(None) if periodic else slice(pml, -pml), pml:-pml]
    eps_ref = float(math.sqrt(eps_in.min() * eps_in.max()))
    (sx_n, kx_n, ax_n), (sx_h, kx_h, ax_h) = _profiles(nx, pml, cell, eps_ref=eps_ref)
    if periodic:  # no absorbing layer across the periodic axis
        for a in (sx_n, ax_n, sx_h, ax_h):
            a[:] = 0.0
        kx_n[:], kx_h[:] = 1.0, 1.0
    (sy_n, ky_n, ay_n), (sy_h, ky_h, ay_h) = _profiles(ny, pml, cell, eps_ref=eps_ref)
    bx_n, cx_n = _cpml_bc(sx_n, kx_n, ax_n, dt)
    bx_h, cx_h = _cpml_bc(sx_h, kx_h, ax_h, dt)
    by_n, cy_n = _cpml_bc(sy_n, ky_n, ay_n, dt)
    by_h, cy_h = _cpml_bc(sy_h, ky_h, ay_h, dt)

    ez = np.zeros((nx, ny), dtype=dtype)
    hx = np.zeros((nx, ny - 1), dtype=dtype)  # at (i, j + 1/2)
    hy = np.zeros((nx - 1, ny), dtype=dtype)  # at (i + 1/2, j)
    h_coef = dtype(dt / (MU0 * cell))
    # 1/kappa folded into the difference operators (T&H eq. 7.105-7.107, kappa in the
    # denominators of the spatial derivatives)
    inv_ky_h = (1.0 / ky_h)[None, :].astype(dtype)
    inv_kx_h = (1.0 / kx_h)[:, None].astype(dtype)
    inv_kx_n = (1.0 / kx_n[1:-1])[:, None].astype(dtype)
    inv_ky_n = (1.0 / ky_n[1:-1])[None, :].astype(dtype)
    # psi for dEz/dy (Hx update, half nodes in y), dEz/dx (Hy, half nodes in x),
    # dHy/dx (Ez, interior nodes in x), dHx/dy (Ez, interior nodes in y)
    psi_hx = _Slabs(by_h, cy_h, pml, nx, 1, dtype)
    psi_hy = _Slabs(bx_h, cx_h, pml, ny, 0, dtype, off=periodic)
    psi_ezx = _Slabs(bx_n[1:-1], cx_n[1:-1], pml - 1, ny - 2, 0, dtype, off=periodic)
    psi_ezy = _Slabs(by_n[1:-1], cy_n[1:-1], pml - 1, nx - 2, 1, dtype)

    record = np.zeros((len(receivers), steps + 1), dtype=np.float64)
    ri = np.array([r[0] for r in receivers], dtype=int)
    rj = np.array([r[1] for r in receivers], dtype=int)
    # soft source: -Cb * Jz with Jz = I / cell^2 (A/m^2) spread over one node's cell
    soft = [(s.i, s.j, (-cb_full[s.i, s.j] / cell**2).astype(dtype),
             np.asarray(s.waveform, dtype=dtype)) for s in sources if not s.hard]
    hard = [(s.i, s.j, np.asarray(s.waveform, dtype=dtype)) for s in sources if s.hard]
    inner = (slice(1, -1), slice(1, -1))
    for n in range(steps):
        # --- H from n - 1/2 to n + 1/2 (Faraday): dHx/dt = -dEz/dy / mu, dHy/dt = dEz/dx / mu
        dey = ez[:, 1:] - ez[:, :-1]
        dex = ez[1:, :] - ez[:-1, :]
        hx -= h_coef * (dey * inv_ky_h)
        for sl, psi in psi_hx.update(dey):
            hx[:, sl] -= h_coef * psi
        hy += h_coef * (dex * inv_kx_h)
        for sl, psi in psi_hy.update(dex):
            hy[sl] += h_coef * psi
        # --- Ez from n to n + 1 (Ampere): e dEz/dt + s Ez = dHy/dx - dHx/dy - Jz
        dhy = hy[1:, 1:-1] - hy[:-1, 1:-1]
        dhx = hx[1:-1, 1:] - hx[1:-1, :-1]
        curl = dhy * inv_kx_n - dhx * inv_ky_n
        for sl, psi in psi_ezx.update(dhy):
            curl[sl] += psi
        for sl, psi in psi_ezy.update(dhx):
            curl[:, sl] -= psi
        ez[inner] = ca * ez[inner] + cb_in * curl
        for i, j, coef, w in soft:
            ez[i, j] += coef * w[n]
        for i, j, w in hard:
            ez[i, j] = w[n]
        if periodic:
            ez[0], ez[-1] = ez[-2], ez[1]
        record[:, n + 1] = ez[ri, rj]
    return record
