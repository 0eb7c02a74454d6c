"""Plane element to sphere view factor (vfactor.planetview).

Outside reference: the defining integral F = (1/pi) int cos(theta) dOmega over the
directions in which the element sees the sphere (Siegel & Howell, Thermal Radiation Heat
Transfer, definition of the view factor of a differential element), integrated here
numerically with scipy over the cap; and the catalog formula as written independently in
tests/test_heating.py (howell_plate_to_sphere).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import dblquad

from test_heating import howell_plate_to_sphere
from vfactor.planetview import plate_sphere_view_factor


def _numerical(H, lam):
    """(1/pi) int over the cap of the sphere seen from the point of max(0, n . w) dOmega,
    the cap in polar coordinates (psi, phi) about the direction to the centre."""
    half = math.asin(1.0 / H)
    n = np.array([math.sin(lam), 0.0, math.cos(lam)])      # centre along +z

    def integrand(phi, psi):
        w = np.array([math.sin(psi) * math.cos(phi), math.sin(psi) * math.sin(phi),
                      math.cos(psi)])
        return max(0.0, float(n @ w)) * math.sin(psi)

    val, _ = dblquad(integrand, 0.0, half, 0.0, 2 * math.pi, epsabs=1e-12, epsrel=1e-10)
    return val / math.pi


@pytest.mark.parametrize("altitude_km", [300.0, 20000.0])
@pytest.mark.parametrize("lam_deg", [0.0, 60.0, 85.0, 110.0])
def test_closed_form_against_the_integral(altitude_km, lam_deg):
    R = 6371.0
    H = (R + altitude_km) / R
    lam = math.radians(lam_deg)
    f = float(plate_sphere_view_factor(H, math.cos(lam)))
    assert f == pytest.approx(_numerical(H, lam), abs=1e-8)
    assert f == pytest.approx(howell_plate_to_sphere(H, lam), rel=1e-12, abs=1e-15)


def test_limits_and_shape():
    H = np.array([1.1, 1.1, 1.1, 2.0])
    c = np.array([1.0, 1.0 / 1.1, -1.0 / 1.1, -1.0])
    f = plate_sphere_view_factor(H, c)
    assert f[0] == pytest.approx(1 / 1.21, rel=1e-14)            # facing the centre
    assert f[1] == pytest.approx(1 / 1.1 ** 3, rel=1e-9)          # edge of the full branch
    assert f[2] == pytest.approx(0.0, abs=1e-9) and f[3] == 0.0   # below the horizon
    with pytest.raises(ValueError, match="H must be > 1"):
        plate_sphere_view_factor(1.0, 0.5)
