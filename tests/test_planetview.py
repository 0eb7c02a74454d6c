"""Plane element to sphere view factor and albedo factor (vfactor.planetview).

Outside reference: the defining integral F = (1/pi) int cos(theta) dOmega over the
directions in which the element sees the sphere (Siegel & Howell, Thermal Radiation Heat
Transfer, definition of the view factor of a differential element), integrated here
numerically with scipy over the cap; and the catalog formula as written independently in
tests/test_heating.py (howell_plate_to_sphere). The albedo factor is checked against its
defining surface integral over the visible cap, integrated with scipy.integrate.dblquad
over ground points (not over directions, as the code does).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import dblquad

from test_heating import howell_plate_to_sphere
from vfactor.planetview import plate_sphere_albedo_factor, plate_sphere_view_factor


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


# --- albedo factor -------------------------------------------------------------------

def _albedo_by_dblquad(H, normal, sun):
    """Independent oracle: Q = (1/pi) int max(0, cos Z) max(0, cos t_e) cos t_g / s^2 dA
    over the cap of a unit sphere seen from an element at (0, 0, H) (irradiance from a
    Lambertian surface of radiance max(0, cos Z) / pi: Siegel & Howell, Thermal Radiation
    Heat Transfer, 4th ed., ch. 2, radiance and irradiance; common practice), integrated by
    scipy.integrate.dblquad over the ground point (central angle g from the sub-element
    point, azimuth phi). Returns (value, scipy's error estimate)."""
    normal = np.asarray(normal, float)
    sun = np.asarray(sun, float)

    def integrand(phi, g):
        m = np.array([math.sin(g) * math.cos(phi), math.sin(g) * math.sin(phi), math.cos(g)])
        w = m - np.array([0.0, 0.0, H])          # element -> ground point
        s = math.sqrt(w @ w)
        cos_element = (normal @ w) / s
        cos_ground = -(m @ w) / s
        mu = m @ sun
        if cos_element <= 0.0 or mu <= 0.0:
            return 0.0
        return mu * cos_element * cos_ground / (s * s) * math.sin(g) / math.pi

    return dblquad(integrand, 0.0, math.acos(1.0 / H), 0.0, 2 * math.pi, epsabs=1e-11,
                   epsrel=1e-10)


def _tilted(tilt_deg):
    """Unit normal tilted by tilt_deg from nadir (-z) toward +x."""
    t = math.radians(tilt_deg)
    return np.array([math.sin(t), 0.0, -math.cos(t)])


def _sun_at(zenith_deg, azimuth_rad=1.0):
    """Unit vector toward the Sun at this zenith angle over the sub-element point."""
    z = math.radians(zenith_deg)
    return np.array([math.sin(z) * math.cos(azimuth_rad), math.sin(z) * math.sin(azimuth_rad),
                     math.cos(z)])


@pytest.mark.parametrize("altitude_km, tilt_deg, zenith_deg", [
    (300.0, 0.0, 30.0),        # facing nadir, whole cap lit
    (300.0, 80.0, 75.0),       # horizon and terminator both cross the cap
    (300.0, 130.0, 30.0),      # tilted away: a sliver of the cap
    (2000.0, 40.0, 100.0),     # sub-element point in the dark, lit limb
    (2000.0, 100.0, 75.0),
    (20000.0, 0.0, 30.0),      # high orbit, large cap
])
def test_albedo_factor_against_the_integral(altitude_km, tilt_deg, zenith_deg):
    R = 6371.0
    H = (R + altitude_km) / R
    normal, sun = _tilted(tilt_deg), _sun_at(zenith_deg)
    expected, err = _albedo_by_dblquad(H, normal, sun)
    assert err < 1e-9
    q = float(plate_sphere_albedo_factor([H], normal[None], sun, [[0.0, 0.0, 1.0]])[0])
    # stated accuracy of the quadrature (module notes: ALBEDO_NODES per piece): 1e-7 of
    # the factor of an element facing the subsolar point, ~1/H^2
    assert abs(q - expected) < 2e-7 / H ** 2, (q, expected)
    assert q > 0.0
    # never more than the view factor (cos Z <= 1): Howell's catalog value
    f = float(plate_sphere_view_factor(H, -normal[2]))
    assert q <= f * (1.0 + 1e-12)


def test_albedo_factor_limits_frame_and_errors():
    rng = np.random.default_rng(4)
    H = 1.15
    normal = rng.normal(size=(50, 3))
    normal /= np.linalg.norm(normal, axis=1, keepdims=True)
    sun = _sun_at(50.0)
    up = np.tile([0.0, 0.0, 1.0], (50, 1))
    q = plate_sphere_albedo_factor(np.full(50, H), normal, sun, up)
    # the same configurations turned by a rotation give the same values (the factor
    # depends on angles only; rotation from scipy.spatial.transform, an independent
    # library)
    from scipy.spatial.transform import Rotation

    turn = Rotation.from_rotvec([0.3, -1.1, 0.7]).as_matrix()
    q_turned = plate_sphere_albedo_factor(np.full(50, H), normal @ turn.T, turn @ sun,
                                          up @ turn.T)
    np.testing.assert_allclose(q_turned, q, rtol=1e-9, atol=1e-13)
    # bounded by the view factor (cos Z <= 1) and zero where nothing sunlit is in sight
    f = plate_sphere_view_factor(np.full(50, H), -normal[:, 2])
    assert np.all(q <= f * (1.0 + 1e-12)) and np.all(q >= 0.0)
    gmax = math.degrees(math.acos(1.0 / H))
    dark = plate_sphere_albedo_factor(np.full(50, H), normal, _sun_at(90.0 + gmax + 0.01), up)
    np.testing.assert_array_equal(dark, 0.0)
    away = plate_sphere_albedo_factor([H], [_tilted(180.0)], sun, [[0.0, 0.0, 1.0]])
    assert away[0] == 0.0                                  # facing straight up
    with pytest.raises(ValueError, match="H must be > 1"):
        plate_sphere_albedo_factor([1.0], [_tilted(0.0)], sun, [[0.0, 0.0, 1.0]])
    with pytest.raises(ValueError, match=r"normal must have shape \(1, 3\)"):
        plate_sphere_albedo_factor([1.2], [[0.0, 1.0]], sun, [[0.0, 0.0, 1.0]])
