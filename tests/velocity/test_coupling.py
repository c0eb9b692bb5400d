"""Tests of slicer.velocity.coupling: the field of a line source above a half-space and the
correction of hyperbola picks for antennas coupled to the ground.

The field is checked against physics outside the project:
- far from the source and inside the critical angle, the plane-wave integral is dominated by
  its stationary point ``kx = k1 sin(a)`` (the method of stationary phase; Chew 1990, Waves and
  Fields in Inhomogeneous Media, ch. 2, from memory), which gives the free-space cylindrical
  wave of the ground, ``(i / 4) H0(k1 r)`` (scipy.special.hankel1), times the transmission
  factor ``2 kz1 / (kz0 + kz1)`` and the air gap's phase ``exp(i kz0 h)``, with
  ``kz0 = sqrt(k0^2 - kx^2)``, ``kz1 = k1 cos(a)``. Its error falls as ``1 / (k1 r)``; at
  ``k1 r`` of 125-130 here the measured agreement is within 10 % and 0.05 rad.
The whole correction is checked on the full-wave survey of tests/fullwave.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.special

from slicer.core.conventions import C_M_PER_NS
from slicer.core.errors import SettingsError
from slicer.velocity.coupling import correct_for_coupling, line_source_field

V = 0.1  # m/ns, ground of relative permittivity about 9
F = 1.0  # GHz
Z = 2.0  # m, 20 wavelengths deep


@pytest.mark.parametrize("height", [0.0, 0.05])
@pytest.mark.parametrize("angle", [0.0, 10.0, 15.0])  # degrees; the critical angle is 19.5
def test_field_far_from_the_source_is_the_transmitted_cylindrical_wave(height, angle):
    x = Z * math.tan(math.radians(angle))
    field = line_source_field([F], [x], depth=Z, velocity=V, height=height)
    assert field.dims == ("frequency", "offset")
    k0, k1 = 2 * math.pi * F / C_M_PER_NS, 2 * math.pi * F / V
    kx = k1 * math.sin(math.radians(angle))
    kz0, kz1 = math.sqrt(k0 * k0 - kx * kx), k1 * math.cos(math.radians(angle))
    # stationary phase (module docstring); scipy's Hankel function of the first kind
    expected = (0.25j * scipy.special.hankel1(0, k1 * math.hypot(x, Z))
                * 2 * kz1 / (kz0 + kz1) * np.exp(1j * kz0 * height))
    ratio = complex(field.values[0, 0]) / expected
    assert abs(abs(ratio) - 1) < 0.1, ratio
    assert abs(np.angle(ratio)) < 0.05, ratio  # the air gap alone turns it 1.05 rad at 5 cm


@pytest.mark.parametrize("options, where", [
    (dict(depth=0.4, velocity=V, height=-0.01), "height"),
    (dict(depth=0.4, velocity=0.3, height=0.0), "velocity"),
    (dict(depth=0.0, velocity=V, height=0.0), "depth"),
])
def test_field_refuses_bad_input(options, where):
    with pytest.raises(SettingsError) as info:
        line_source_field([0.4], [0.0], **options)
    assert info.value.where == where


def test_correction_refuses_a_bad_height():
    with pytest.raises(SettingsError) as info:
        correct_for_coupling(None, [], antenna_height=math.nan)
    assert info.value.where == "antenna_height"


@pytest.mark.parametrize("options, where", [
    (dict(antenna_height=0.02, target_radius=-0.05), "target_radius"),
    (dict(antenna_height=None, target_radius=math.inf), "target_radius"),
    (dict(antenna_height=0.02, target_radius=0.05, radius_std=-1.0), "radius_std"),
])
def test_correction_refuses_a_bad_radius(options, where):
    with pytest.raises(SettingsError) as info:
        correct_for_coupling(None, [], **options)
    assert info.value.where == where
