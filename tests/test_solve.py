"""``vfactor solve``: temperatures from the couplings and loads vfactor computes.

Outside references (each beside its test):
* radiative balance of a Sun-pointed plate radiating from one side, T = (alpha S /
  (eps sigma))^(1/4) (Stefan-Boltzmann law, energy balance; textbook, e.g. Gilmore,
  Spacecraft Thermal Control Handbook Vol. I, 2002, ch. 2 — chapter from memory);
* isothermal sphere in a circular orbit: orbit-average balance eps sigma 4 pi r^2 T^4 =
  alpha S pi r^2 (1 - f_E) + eps OLR 4 pi r^2 F, with the eclipse fraction f_E = (1/pi)
  acos(sqrt(h^2 + 2 R h) / ((R + h) cos beta)) and the sphere-to-planet view factor
  F = (1 - cos rho) / 2, sin rho = R / (R + h) (textbook formulas of orbital heating,
  e.g. Gilmore ch. 2; from memory);
* N radiation shields of equal emissivity between two large parallel plates divide the
  heat flow by N + 1 (Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, 6th
  ed., section 13.3) — here with the couplings vfactor computes for real plates;
* a thermostat on a node with one conductance to a fixed sink: the on and off times of
  the exponential relaxation, t = tau ln((T_inf - T_a) / (T_inf - T_b)) (first-order ODE,
  textbook calculus);
* the reported temperature error against the scatter over independent seeds (the
  definition of a one-sigma error; chi-square bounds for 8 samples).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor import pipeline
from vfactor.cli import main
from vfactor.constants import DEEP_SPACE_TEMPERATURE_K, STEFAN_BOLTZMANN as SIGMA
from vfactor.errors import ModelError
from vfactor.h5read import read_results
from vfactor.netmodel import Heater, network_from_table
from vfactor.network import Network, cyclic_transient
from vfactor.solve import _network, solve_results

PLATE = """
[model]
name = "sun-pointed plate (invented test)"

[coatings.c]
solar_absorptivity = 0.6
ir_emissivity = 0.8

[[parts]]
name = "plate"
shape = "rectangle"
size = [0.5, 0.5]
front = { coating = "c", node = "plate" }

[radiation]
rays_per_node = 2000

[orbit]
type = "circular"
altitude_km = 35786.0
inclination_deg = 0.0
raan_deg = 0.0
epoch = "2027-06-21T00:00:00Z"
orbits = 1
steps_per_orbit = 12

[attitude]
mode = "sun"
sun_axis = "+z"

[environment]
case = "custom"
solar_constant = 1361.0
albedo = 0.0
planet_ir = 0.0

[network]
[[network.nodes]]
node = "plate"
capacity_J_K = 500.0
"""


def test_sun_pointed_plate_radiating_from_its_front(tmp_path):
    model = tmp_path / "plate.toml"
    model.write_text(PLATE)
    out = tmp_path / "plate.h5"
    pipeline.run(model, out)
    temps = solve_results(read_results(out))
    # no eclipse at the June solstice in the equatorial high orbit: always sunlit, so the
    # steady and cyclic temperatures are the balance of direct solar and emission
    T = (0.6 * 1361.0 / (0.8 * SIGMA) + DEEP_SPACE_TEMPERATURE_K ** 4) ** 0.25
    assert temps.steady[0] == pytest.approx(T, rel=1e-6)
    np.testing.assert_allclose(temps.transient[:, 0], T, rtol=1e-4)
    assert temps.steady_stderr[0] < 1e-6                  # nothing random on a lone plate


SPHERE = """
[model]
name = "isothermal sphere (invented test)"

[coatings.c]
solar_absorptivity = 0.5
ir_emissivity = 0.7

[[parts]]
name = "ball"
shape = "sphere"
radius = 0.3
max_edge = 0.08
front = { coating = "c", node = "ball" }

[radiation]
rays_per_node = 2000
planet_rays_per_facet = 64
sun_rays_per_facet = 16

[orbit]
type = "circular"
altitude_km = 500.0
inclination_deg = 0.0
raan_deg = 0.0
epoch = "2027-03-20T12:00:00Z"
orbits = 1
steps_per_orbit = 180

[environment]
case = "custom"
solar_constant = 1361.0
albedo = 0.0
planet_ir = 237.0
"""


def test_isothermal_sphere_orbit_average_balance(tmp_path):
    model = tmp_path / "sphere.toml"
    model.write_text(SPHERE)
    out = tmp_path / "sphere.h5"
    pipeline.run(model, out)
    results = read_results(out)
    temps = solve_results(results)
    R, h = 6378.137, 500.0
    beta = float(np.mean(results.trajectory.beta))
    f_e = math.acos(math.sqrt(h * h + 2 * R * h) / ((R + h) * math.cos(beta))) / math.pi
    rho = math.asin(R / (R + h))
    F = (1 - math.cos(rho)) / 2
    r = 0.3
    area = 4 * math.pi * r * r
    T = ((0.5 * 1361.0 * math.pi * r * r * (1 - f_e) + 0.7 * 237.0 * area * F)
         / (0.7 * SIGMA * area)) ** 0.25
    # tolerance: the faceted sphere (area within 1 %), the eclipse sampled at 180 steps
    assert temps.steady[0] == pytest.approx(T, rel=0.01)


SHIELDS = """
[model]
name = "parallel plates with shields (invented test)"

[coatings.c]
solar_absorptivity = 0.5
ir_emissivity = 0.5

[[parts]]
name = "hot"
shape = "rectangle"
size = [4.0, 4.0]
center = [0.0, 0.0, 0.0]
front = { coating = "c", node = "hot" }

[[parts]]
name = "cold"
shape = "rectangle"
size = [4.0, 4.0]
center = [0.0, 0.0, 0.01]
z_axis = [0, 0, -1]
front = { coating = "c", node = "cold" }

[radiation]
rays_per_node = 40000
"""


def _shield(k, z):
    return f"""
[[parts]]
name = "shield{k}"
shape = "rectangle"
size = [4.0, 4.0]
center = [0.0, 0.0, {z}]
front = {{ coating = "c", node = "shield{k}.front" }}
back = {{ coating = "c", node = "shield{k}.back" }}
"""


def _thin(k):
    # a thin metal shield: its two sides are separate radiation nodes (each reflects what
    # it receives from its own side) joined by a large conductance (isothermal)
    return (f'[[network.links]]\na = "shield{k}.front"\nb = "shield{k}.back"\n'
            f'conductance_W_K = 1.0e5\n')


def _hot_flow(tmp_path, n_shields):
    text = SHIELDS + "".join(_shield(k, 0.01 * (k + 1) / (n_shields + 1))
                             for k in range(n_shields))
    model = tmp_path / f"s{n_shields}.toml"
    model.write_text(text + '\n[network]\n[[network.nodes]]\nnode = "hot"\nfixed_K = 400.0\n'
                     '[[network.nodes]]\nnode = "cold"\nfixed_K = 300.0\n'
                     + "".join(_thin(k) for k in range(n_shields)))
    out = tmp_path / f"s{n_shields}.h5"
    pipeline.run(model, out)
    results = read_results(out)
    g = results.geometry
    import tomllib

    spec = network_from_table(tomllib.loads(model.read_text())["network"], g.nodes.names,
                              g.nodes.area)
    net = _network(results, spec)
    from vfactor.network import _balance, steady_state

    T = steady_state(net, np.zeros(g.n_nodes))
    flow, _ = _balance(net, T, np.zeros(g.n_nodes))
    return -flow[g.nodes.names.index("hot")]          # what the hot plate must be given


def test_radiation_shields_with_computed_couplings(tmp_path):
    q0 = _hot_flow(tmp_path, 0)
    # large plates: the flow is near the infinite-plate value (edges lose a little)
    q_inf = SIGMA * 16.0 * (400.0 ** 4 - 300.0 ** 4) / (1 / 0.5 + 1 / 0.5 - 1)
    assert q0 == pytest.approx(q_inf, rel=0.04)
    for n in (1, 2):
        assert _hot_flow(tmp_path, n) / q0 == pytest.approx(1.0 / (n + 1), rel=0.04)


def test_thermostat_duty_against_the_exponential_relaxation():
    # one node of capacity C linked by G to a sink at T0; heater P between on and off
    C, G, T0, P, on, off = 2000.0, 1.0, 250.0, 40.0, 270.0, 275.0
    net = Network.build(("node", "sink"), [C, 1.0], np.zeros((2, 2)), np.zeros(2),
                        conductance=np.array([[0, G], [G, 0]]), fixed=[np.nan, T0])
    tau, T_on = C / G, T0 + P / G
    t_on = tau * math.log((T_on - on) / (T_on - off))
    t_off = tau * math.log((off - T0) / (on - T0))
    period = 40 * (t_on + t_off)                    # many cycles in one "orbit"
    res = cyclic_transient(net, np.array([0.0, period / 2]), np.zeros((2, 2)), period,
                           initial=np.array([on, T0]), heaters=[Heater(0, P, on, off)],
                           tol=1e-3, rtol=1e-8, atol=1e-6)
    assert res.duty[0] == pytest.approx(t_on / (t_on + t_off), abs=0.03)
    assert np.all(res.temperature[:, 0] > on - 0.05)
    assert np.all(res.temperature[:, 0] < off + 0.05)


def test_temperature_error_matches_the_scatter_over_seeds(tmp_path):
    from test_cases import VEHICLE

    model = tmp_path / "v.toml"
    model.write_text(VEHICLE.replace("rays_per_node = 3000", "rays_per_node = 1500"))
    steady, sigma = [], []
    for seed in range(8):
        out = tmp_path / f"v{seed}.h5"
        pipeline.run(model, out, seed=seed + 1)
        t = solve_results(read_results(out))
        steady.append(t.steady)
        sigma.append(t.steady_stderr)
    steady, sigma = np.array(steady), np.array(sigma)
    scatter = steady.std(axis=0, ddof=1)
    reported = sigma.mean(axis=0)
    # a node nothing hides from the Sun and the planet is exact (direct solar by its lit
    # share, planet loads by their closed forms): both are rounding noise there
    random = reported > 1e-6
    assert random.sum() >= 2 and np.all(scatter[~random] < 1e-6), (scatter, reported)
    ratio = scatter[random] / reported[random]
    # 8 seeds: the sample standard deviation is within [0.45, 1.6] of the true one with
    # about 95 % probability (chi-square, 7 degrees of freedom); the median over nodes
    # must sit in that range, and no node may be off by more than a factor 3
    assert 0.45 < float(np.median(ratio)) < 1.6, ratio
    assert np.all(ratio < 3.0), ratio


def test_solve_command_writes_the_file_tables_and_figure(tmp_path, capsys):
    model = tmp_path / "plate.toml"
    model.write_text(PLATE)
    out = tmp_path / "plate.h5"
    pipeline.run(model, out)
    folder = tmp_path / "temps"
    assert main(["solve", str(out), "-o", str(folder)]) == 0
    text = capsys.readouterr().out
    assert "Quick-look temperatures" in text and "not a substitute" in text
    for name in ("temperatures.csv", "temperature_nodes.csv", "temperatures.png"):
        assert (folder / name).is_file()
    import h5py

    with h5py.File(out) as h:
        assert h["temperatures/steady"].attrs["units"] == "K"
        steady = float(h["temperatures/steady"][0])
    import csv

    with (folder / "temperature_nodes.csv").open(newline="") as fh:
        rows = list(csv.reader(fh))
    assert float(rows[1][1]) == steady                     # the CSV reads back bit for bit


@pytest.mark.parametrize("network, message", [
    ('[[network.nodes]]\nnode = "nothere"\ncapacity_J_K = 1.0\n', "no node matches"),
    ('[[network.links]]\na = "plate"\nb = "plate"\nconductance_W_K = 1.0\n', "two different"),
    ('[[network.heaters]]\nnode = "plate"\npower_W = 1.0\non_K = 280.0\noff_K = 270.0\n',
     "must be above on_K"),
    ('[[network.nodes]]\nnode = "plate"\nmass_kg = 1.0\n', "specific_heat_J_kg_K"),
    ('wrong = 1\n', "unknown key"),
])
def test_bad_network_tables_get_one_line(tmp_path, capsys, network, message):
    model = tmp_path / "bad.toml"
    model.write_text(PLATE.replace('[[network.nodes]]\nnode = "plate"\ncapacity_J_K = 500.0\n',
                                   network))
    assert main(["check", str(model)]) == 2
    captured = capsys.readouterr()
    assert message in captured.out + captured.err
    with pytest.raises(ModelError, match=message):
        import tomllib

        network_from_table(tomllib.loads(model.read_text())["network"], ["plate"], [0.25])
