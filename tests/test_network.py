"""Quick-look thermal network: steady state, cyclic transient, sensitivity (vfactor.network).

Outside references (each beside its test):
* radiative energy balance of an isolated plate (Stefan-Boltzmann law; e.g. Incropera &
  DeWitt, Fundamentals of Heat and Mass Transfer, 6th ed., ch. 12; Gilmore, Spacecraft
  Thermal Control Handbook Vol. I, 2002, ch. 2 — chapter numbers from memory);
* exchange between large parallel grey plates, q = sigma (T1^4 - T2^4) / (1/e1 + 1/e2 - 1),
  and N radiation shields of equal emissivity dividing the flow by N + 1 (Incropera &
  DeWitt, 6th ed., section 13.3, radiation shields);
* the first-order linear ODE C dT/dt = Q(t) - G (T - T0): its step response and its
  periodic response to a sinusoidal load (amplitude Q1 / sqrt(G^2 + (C w)^2), lag
  atan(C w / G)), textbook calculus;
* the implicit function theorem for the sensitivity, checked by finite differences.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor.constants import STEFAN_BOLTZMANN as SIGMA
from vfactor.network import (Network, NetworkError, cyclic_transient, steady_state,
                             temperature_sensitivity)


def test_isolated_sun_pointed_plate():
    alpha, eps, S, A = 0.3, 0.8, 1361.0, 0.25
    # one node, both sides radiating to space: exchange area eps A per side
    net = Network.build(["plate"], [1.0], [[0.0]], [2 * eps * A])
    T = steady_state(net, [alpha * S * A])
    expected = (alpha * S / (2 * eps * SIGMA) + net.space_temperature ** 4) ** 0.25
    assert T[0] == pytest.approx(expected, rel=1e-10)


@pytest.mark.parametrize("shields", [0, 1, 3])
def test_radiation_shields_divide_the_flow(shields):
    eps, A, T_hot, T_cold = 0.1, 1.0, 400.0, 300.0
    n = shields + 2
    pair = A / (2.0 / eps - 1.0)                 # eps1 = eps2 = eps, infinite plates
    ex = np.zeros((n, n))
    for i in range(n - 1):
        ex[i, i + 1] = ex[i + 1, i] = pair
    fixed = np.full(n, np.nan)
    fixed[0], fixed[-1] = T_hot, T_cold
    net = Network.build([f"n{i}" for i in range(n)], np.ones(n), ex, np.zeros(n),
                        fixed=fixed)
    T = steady_state(net, np.zeros(n))
    flow = SIGMA * pair * (T[0] ** 4 - T[1] ** 4)
    bare = SIGMA * pair * (T_hot ** 4 - T_cold ** 4)
    assert flow == pytest.approx(bare / (shields + 1), rel=1e-9)


def test_conductive_link_and_sensitivity():
    # node 1 held at 290 K; node 0 gets 10 W through a 0.5 W/K link and radiates a little
    g = np.array([[0.0, 0.5], [0.5, 0.0]])
    net = Network.build(["box", "plate"], [100.0, 100.0], np.zeros((2, 2)), [0.01, 0.0],
                        conductance=g, fixed=[np.nan, 290.0])
    T = steady_state(net, [10.0, 0.0])
    # balance of node 0: 10 = 0.5 (T - 290) + sigma 0.01 (T^4 - Ts^4)
    residual = 10.0 - 0.5 * (T[0] - 290.0) - SIGMA * 0.01 * (T[0] ** 4 - 2.7 ** 4)
    assert abs(residual) < 1e-9
    dT = temperature_sensitivity(net, T)
    h = 1e-3
    fd = (steady_state(net, [10.0 + h, 0.0])[0] - steady_state(net, [10.0 - h, 0.0])[0]) / (2 * h)
    assert dT[0, 0] == pytest.approx(fd, rel=1e-6)
    assert dT[1, 0] == 0.0


def test_cyclic_transient_matches_the_periodic_solution():
    C, G, T0, Q0, Q1, P = 2000.0, 1.0, 280.0, 20.0, 15.0, 5400.0
    w = 2 * math.pi / P
    net = Network.build(["box", "sink"], [C, 1.0], np.zeros((2, 2)), [0.0, 0.0],
                        conductance=[[0, G], [G, 0]], fixed=[np.nan, T0])
    t = np.linspace(0.0, P, 181)[:-1]
    loads = np.column_stack([Q0 + Q1 * np.sin(w * t), np.zeros_like(t)])
    r = cyclic_transient(net, t, loads, P, tol=1e-4, rtol=1e-7, atol=1e-6)
    lag = math.atan(C * w / G)
    amp = Q1 / math.sqrt(G ** 2 + (C * w) ** 2)
    exact = T0 + Q0 / G + amp * np.sin(w * r.time - lag)
    # loads are linear between 2-degree samples: interpolation error ~ Q1 (w dt)^2 / 8 / G
    assert np.max(np.abs(r.temperature[:, 0] - exact)) < 0.01 * amp
    assert abs(r.temperature[-1, 0] - r.temperature[0, 0]) < 1e-3       # the cycle repeats
    assert r.orbits >= 1 and np.all(r.temperature[:, 1] == T0)


def test_step_response_of_one_orbit():
    C, G, T0, Q = 500.0, 2.0, 250.0, 40.0
    net = Network.build(["a", "b"], [C, 1.0], np.zeros((2, 2)), [0.0, 0.0],
                        conductance=[[0, G], [G, 0]], fixed=[np.nan, T0])
    t = np.array([0.0, 100.0])  # one sample pair of a 200 s "orbit"
    loads = np.array([[Q, 0.0], [Q, 0.0]])
    r = cyclic_transient(net, t, loads, 200.0, initial=[T0, T0], tol=1e9, rtol=1e-10,
                         atol=1e-10)
    exact = T0 + Q / G * (1.0 - np.exp(-G * r.time / C))
    assert r.temperature[:, 0] == pytest.approx(exact, rel=1e-7)


def test_unsolvable_networks_are_refused():
    lonely = Network.build(["a", "b"], [1.0, 1.0], np.zeros((2, 2)), [0.1, 0.0])
    with pytest.raises(NetworkError, match="'b' has no conductive or radiative coupling"):
        steady_state(lonely, [1.0, 1.0])
    with pytest.raises(NetworkError, match="exchange areas"):
        Network.build(["a"], [1.0], [[-1.0]], [0.0])
    no_capacity = Network.build(["a"], [0.0], [[0.0]], [0.1])
    with pytest.raises(NetworkError, match="no heat capacity"):
        cyclic_transient(no_capacity, [0.0, 1.0], [[1.0], [1.0]], 2.0)
