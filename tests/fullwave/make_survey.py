"""Simulate the full-wave test survey with the tests' own FDTD solver and write it as a slicer
survey: SEG-Y lines, a line table, a survey TOML and ``truth.json``.

    python tests/fullwave/make_survey.py OUTDIR

The invented site: 2.4 m lines over ground of relative permittivity 9 (0.1 m/ns) and 5 mS/m,
a steel pipe (a perfect conductor) and an air-filled plastic pipe (an air-filled circle; its
wall, a few mm thick, is far below the 1 cm cell and is left out), both running across the
lines, and a wetter layer (relative permittivity 16, 10 mS/m) from 0.9 m down. A bistatic
antenna pair 0.14 m apart, 2 cm above the ground, is moved along the line; every trace is its
own FDTD run (a 2-D model: the pipes are infinite cylinders across the line). The 8 lines of the
survey, 0.25 m apart, are copies of that one profile, each with its own seeded noise. The
output is the same, bit for bit, on every run on the same machine (no randomness besides
the seeded noise; FDTD arithmetic in float32 is deterministic for one numpy build).

Time axis: sample k of a trace is at ``k * 0.1 ns`` after the start of the run; the source
current peaks at ``EMISSION_NS`` (its Ricker wavelet's centre). The source is a soft line
current at the transmitter node; the recorded value is ``Ez`` (V/m, for a 1 A peak current)
at the receiver node. Budget: about 1 s of one core per trace, 61 traces (a minute or two).
Section numbers of cited books are from memory.
"""

from __future__ import annotations

import json
import math
import struct
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
import fdtd  # noqa: E402  (the tests' own solver, beside this file)

# ------------------------------------------------------------------------------ the scenario
F0 = 400e6  # Hz, centre frequency of the Ricker source current
EMISSION_NS = round(1.5 / F0 * 1e9, 9)  # ns, peak of the source current on the record's time axis
CELL = 0.01  # m: <= lambda_min / 10 in the ground up to 2.5 F0 (0.1 m/ns / 1 GHz = 0.1 m)
DT = 0.02e-9  # s, 0.85 of the 2-D Courant limit (23.6 ps); five steps per 0.1 ns sample
DECIMATE = 5
SAMPLE_NS = round(DT * DECIMATE * 1e9, 9)  # 0.1 ns
N_SAMPLES = 300  # 29.9 ns record
PML = 10

GROUND_EPS, GROUND_SIGMA = 9.0, 0.005  # relative permittivity, S/m
DEEP_EPS, DEEP_SIGMA = 16.0, 0.010
INTERFACE_DEPTH = 0.90  # m, top of the wetter layer
ANTENNA_HEIGHT = 0.02  # m above the ground surface
ANTENNA_SEPARATION = 0.14  # m, transmitter behind, receiver ahead of the trace position
PIPES = (
    {"name": "steel pipe", "kind": "conductor", "x": 0.75, "depth_centre": 0.40, "radius": 0.05},
    {"name": "plastic pipe (air-filled)", "kind": "air", "x": 1.65, "depth_centre": 0.55,
     "radius": 0.075},
)
TRACE_SPACING = 0.04  # m
LINE_LENGTH = 2.40  # m
N_LINES, LINE_SPACING = 8, 0.25  # lines along x, 0.25 m apart in y
MARGIN = 0.30  # m of ground beyond the line ends before the CPML
AIR_ABOVE = 0.10  # m of air above the ground before the CPML
GROUND_BELOW = 1.20  # m of ground simulated below the surface
NOISE_SEED = 13
NOISE_FRACTION = 0.002  # noise std as a fraction of the profile's largest |amplitude|

N_TRACES = int(round(LINE_LENGTH / TRACE_SPACING)) + 1


def _node_x(x_m: float) -> int:
    """Grid node index of a position along the line (m from the line start)."""
    return PML + int(round((x_m + MARGIN) / CELL))


def _node_depth(depth_m: float) -> int:
    """Grid node index of a depth (m below the ground surface, negative above it)."""
    return PML + int(round((depth_m + AIR_ABOVE) / CELL))


def build_model() -> fdtd.Model:
    """The 2-D ground model: air over ground over the wetter layer, the two pipes, CPML."""
    nx = _node_x(LINE_LENGTH + MARGIN) + PML + 1
    ny = _node_depth(GROUND_BELOW) + PML + 1
    x = (np.arange(nx) - PML) * CELL - MARGIN
    depth = (np.arange(ny) - PML) * CELL - AIR_ABOVE
    xx, dd = np.meshgrid(x, depth, indexing="ij")
    eps = np.where(dd > 0, GROUND_EPS, 1.0)
    sigma = np.where(dd > 0, GROUND_SIGMA, 0.0)
    deep = dd > INTERFACE_DEPTH
    eps[deep], sigma[deep] = DEEP_EPS, DEEP_SIGMA
    # nodes on a flat boundary take the mean of both sides (Taflove & Hagness 3rd ed. sec. 3.12)
    for level, (e_up, s_up), (e_dn, s_dn) in (
            (0.0, (1.0, 0.0), (GROUND_EPS, GROUND_SIGMA)),
            (INTERFACE_DEPTH, (GROUND_EPS, GROUND_SIGMA), (DEEP_EPS, DEEP_SIGMA))):
        on = np.isclose(dd, level, atol=1e-9)
        eps[on], sigma[on] = 0.5 * (e_up + e_dn), 0.5 * (s_up + s_dn)
    model = fdtd.Model(CELL, eps, sigma, pml=PML)
    for pipe in PIPES:
        inside = np.hypot(xx - pipe["x"], dd - pipe["depth_centre"]) <= pipe["radius"] + 1e-9
        if pipe["kind"] == "conductor":
            model.pec[inside] = True
        else:
            model.eps_r[inside], model.sigma[inside] = 1.0, 0.0
    return model


def simulate_trace(index: int, model: fdtd.Model | None = None) -> np.ndarray:
    """One trace (Ez in V/m, float32, ``N_SAMPLES`` samples 0.1 ns apart) with the antenna pair
    centred at ``index * TRACE_SPACING`` m along the line."""
    model = build_model() if model is None else model
    steps = (N_SAMPLES - 1) * DECIMATE
    t = (np.arange(steps) + 0.5) * DT  # soft-source current at the half steps
    current = fdtd.ricker(t, frequency_hz=F0, delay_s=EMISSION_NS * 1e-9)
    centre = index * TRACE_SPACING
    j = _node_depth(-ANTENNA_HEIGHT)
    tx = fdtd.Source(_node_x(centre - ANTENNA_SEPARATION / 2), j, current)
    rx = (_node_x(centre + ANTENNA_SEPARATION / 2), j)
    record = fdtd.simulate(model, steps=steps, sources=[tx], receivers=[rx], dt=DT)[0]
    return record[::DECIMATE].astype(np.float32)


def line_noise(line: int, scale: float) -> np.ndarray:
    """The seeded noise added to line ``line``: Gaussian, std ``scale``, (traces, samples)."""
    rng = np.random.default_rng([NOISE_SEED, line])
    return (scale * rng.standard_normal((N_TRACES, N_SAMPLES))).astype(np.float32)


def noise_scale(profile: np.ndarray) -> float:
    """Noise standard deviation for a profile (V/m): a fixed fraction of its largest value."""
    return float(NOISE_FRACTION * np.abs(profile).max())


def write_segy(path: Path, samples: np.ndarray) -> None:
    """A SEG-Y rev 2 file (IEEE float32, format code 5) with segyio; the 0.1 ns interval goes
    in the rev 2 extended sample interval (binary header bytes 3273-3280, IEEE double,
    microseconds; SEG-Y rev 2.0 standard, SEG 2017), the revision in bytes 3501-3502."""
    import segyio

    spec = segyio.spec()
    spec.format = 5
    spec.tracecount = samples.shape[0]
    spec.samples = np.zeros(samples.shape[1])
    with segyio.create(str(path), spec) as f:
        f.text[0] = segyio.tools.create_text_header(
            {1: "SLICER TEST SUITE - FULL-WAVE (FDTD) SYNTHETIC LINE, INVENTED SITE",
             2: "EZ IN V/M FOR A 1 A PEAK RICKER LINE CURRENT, 400 MHZ",
             3: "SAMPLE INTERVAL 0.1 NS (REV 2 EXTENDED INTERVAL)"})
        f.bin.update({segyio.BinField.Traces: 1, segyio.BinField.AuxTraces: 0})
        for i in range(samples.shape[0]):
            f.header[i] = {segyio.TraceField.TRACE_SEQUENCE_LINE: i + 1,
                           segyio.TraceField.TRACE_SEQUENCE_FILE: i + 1,
                           segyio.TraceField.CDP: i + 1,
                           segyio.TraceField.TRACE_SAMPLE_COUNT: samples.shape[1]}
        f.trace = np.ascontiguousarray(samples, dtype=np.float32)
    with open(path, "r+b") as f:
        f.seek(3272)
        f.write(struct.pack(">d", SAMPLE_NS * 1e-3))  # ns -> us
        f.seek(3500)
        f.write(bytes([2, 0]))  # revision 2.0


def _echo_time_ns(depth_m: float, offset_m: float) -> float:
    """Two-way time (ns, record axis) of the echo from a flat reflector at ``depth_m`` below
    antennas ``offset_m`` apart at ``ANTENNA_HEIGHT``: Fermat's least-time path, refracted at
    the surface (Snell), through air then ground."""
    from scipy.optimize import minimize_scalar

    c, v = fdtd.C0 * 1e-9, fdtd.C0 * 1e-9 / math.sqrt(GROUND_EPS)  # m/ns
    half = offset_m / 2

    def one_way(u):  # surface crossing at u from the antenna towards the midpoint
        return math.hypot(u, ANTENNA_HEIGHT) / c + math.hypot(half - u, depth_m) / v

    best = minimize_scalar(one_way, bounds=(0.0, half), method="bounded",
                           options={"xatol": 1e-9})
    return EMISSION_NS + 2 * float(best.fun)


def truth() -> dict:
    """What the survey holds, for the tests: velocity, targets, times."""
    v = fdtd.C0 / math.sqrt(GROUND_EPS)
    wavelength = v / F0
    yee = {name: fdtd.yee_phase_velocity(F0, cell=CELL, dt=DT, velocity=v, angle=a) * 1e-9
           for name, a in (("along_axis", 0.0), ("diagonal", math.pi / 4))}
    return {
        "description": "full-wave (2-D FDTD) invented survey; tests/fullwave/make_survey.py",
        "units": {"velocity": "m/ns", "x": "m", "y": "m", "depth": "m", "time": "ns",
                  "frequency": "MHz", "conductivity": "S/m"},
        "velocity": v * 1e-9,
        "velocity_note": "c / sqrt(9); the 5 mS/m loss changes the 400 MHz phase velocity by "
                         "under 0.01 %; the Yee grid's own phase velocities at 400 MHz are in "
                         "grid_velocity",
        "grid_velocity": yee,
        "permittivity": GROUND_EPS, "conductivity": GROUND_SIGMA,
        "centre_frequency": F0 * 1e-6, "wavelength": wavelength,
        "quarter_wavelength": wavelength / 4,
        "cell": CELL, "time_step": DT * 1e9, "sample_interval": SAMPLE_NS,
        "samples": N_SAMPLES,
        "antenna_separation": ANTENNA_SEPARATION, "antenna_height": ANTENNA_HEIGHT,
        "emission_time": EMISSION_NS,
        "emission_note": "peak of the Ricker source current on the record's time axis "
                         "(sample k at k * sample_interval); time zero sample = sample 0",
        "direct_wave_time": EMISSION_NS + ANTENNA_SEPARATION / (fdtd.C0 * 1e-9),
        "surface_echo_time": _echo_time_ns(0.0, ANTENNA_SEPARATION),
        "pipes": [{**p, "depth_top": p["depth_centre"] - p["radius"],
                   "apex_time": _echo_time_ns(p["depth_centre"] - p["radius"],
                                              ANTENNA_SEPARATION)}
                  for p in PIPES],
        "interface_depth": INTERFACE_DEPTH,
        "interface_time": _echo_time_ns(INTERFACE_DEPTH, ANTENNA_SEPARATION),
        "deep_layer": {"permittivity": DEEP_EPS, "conductivity": DEEP_SIGMA},
        "lines": {"count": N_LINES, "spacing": LINE_SPACING, "direction": "x",
                  "length": LINE_LENGTH, "trace_spacing": TRACE_SPACING,
                  "traces": N_TRACES, "y": [k * LINE_SPACING for k in range(N_LINES)]},
        "pipe_axis": "y (across the lines)",
        "noise": {"seed": NOISE_SEED, "fraction_of_max": NOISE_FRACTION},
    }


def make_survey(out: Path) -> dict:
    """Simulate the profile, write the survey into ``out``; return the truth."""
    out.mkdir(parents=True, exist_ok=True)
    model = build_model()
    profile = np.stack([simulate_trace(k, model) for k in range(N_TRACES)])
    scale = noise_scale(profile)
    rows = ["file,start_x,start_y,end_x,end_y"]
    for line in range(N_LINES):
        name = f"FW{line:02d}.sgy"
        write_segy(out / name, profile + line_noise(line, scale))
        y = line * LINE_SPACING
        rows.append(f"{name},0.0,{y:.2f},{LINE_LENGTH:.2f},{y:.2f}")
    (out / "lines.csv").write_text("\n".join(rows) + "\n")
    (out / "survey.toml").write_text(
        "# Full-wave test survey (tests/fullwave/make_survey.py); local grid metres, no CRS.\n"
        "# The 0.1 ns sample interval is in the SEG-Y files (rev 2 extended interval).\n"
        'lines = "lines.csv"\n')
    facts = truth()
    facts["noise"]["std"] = scale
    (out / "truth.json").write_text(json.dumps(facts, indent=1) + "\n")
    return facts


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: python tests/fullwave/make_survey.py OUTDIR")
    make_survey(Path(sys.argv[1]))
