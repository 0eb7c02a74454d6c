"""A quick-look thermal network: temperatures from couplings and heat loads.

Nodes exchange heat by conduction (links of conductance ``G_ij`` [W/K]) and radiation
(exchange areas ``A_ij = eps_i A_i B_ij`` [m2] from :mod:`vfactor.gebhart` or the traced
Gebhart factors, and ``A_i,space`` to deep space at :data:`~vfactor.constants.
DEEP_SPACE_TEMPERATURE_K`), carry a heat capacity ``C_i`` [J/K] and absorb external loads
``Q_i(t)`` [W] (solar, albedo, planet IR from :mod:`vfactor.heating`, plus internal
dissipation). Some nodes may be held at a fixed temperature. The energy balance of node i
is (lumped-parameter network, e.g. Gilmore, Spacecraft Thermal Control Handbook Vol. I,
2nd ed., 2002, ch. 15 on thermal analysis; equation numbers from memory, not given)::

    C_i dT_i/dt = Q_i(t) + sum_j G_ij (T_j - T_i) + sigma sum_j A_ij (T_j^4 - T_i^4)
                  + sigma A_i,space (T_space^4 - T_i^4)

The radiative exchange areas are made symmetric, ``(A_ij + A_ji) / 2``: reciprocity holds
for exact Gebhart factors (``eps_i A_i B_ij = eps_j A_j B_ji``) and Monte Carlo ones obey it
within their error. Energy that the couplings send to inert sides leaves the network; the
caller adds it to ``space`` or reports it (:mod:`vfactor.summary` warns of it).

:func:`steady_state` solves the balance with ``dT/dt = 0`` by Newton's method on the sparse
Jacobian; :func:`cyclic_transient` integrates over the orbit with scipy's implicit,
error-controlled BDF method (stiff: small capacities against large conductances) and
repeats the orbit until the change from one orbit to the next is below a tolerance (the
cyclic steady state of a periodic load). :func:`temperature_sensitivity` gives the
linearised change of the steady temperatures per watt of load, with which the one-sigma
errors of the loads and couplings become one-sigma temperature errors.

This is a quick-look solve for checking inputs, not a substitute for the project's verified
thermal model.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vfactor.constants import DEEP_SPACE_TEMPERATURE_K, STEFAN_BOLTZMANN

__all__ = ["Network", "steady_state", "steady_with_heaters", "cyclic_transient",
           "temperature_sensitivity", "TransientResult", "NetworkError"]


class NetworkError(ValueError):
    """A network that cannot be solved (no path to a sink, a non-converging iteration)."""


@dataclass(frozen=True)
class Network:
    """A thermal network (SI units).

    Attributes
    ----------
    names : tuple of str, (n,)
    capacity : (n,) float — heat capacity [J/K] (> 0 for a transient)
    conductance : (n, n) float or scipy.sparse matrix — symmetric conductive links [W/K]
        (the diagonal is ignored)
    exchange : (n, n) float or scipy.sparse — radiative exchange areas eps_i A_i B_ij [m2]
    exchange_space : (n,) float — exchange area to deep space [m2]
    fixed : (n,) float — NaN for a free node, else its held temperature [K]
    space_temperature : float — sink temperature of deep space [K]
    """

    names: tuple
    capacity: np.ndarray
    conductance: object
    exchange: object
    exchange_space: np.ndarray
    fixed: np.ndarray
    space_temperature: float = DEEP_SPACE_TEMPERATURE_K

    @property
    def n(self) -> int:
        return len(self.names)

    @classmethod
    def build(cls, names, capacity, exchange, exchange_space, conductance=None, fixed=None,
              space_temperature=DEEP_SPACE_TEMPERATURE_K) -> "Network":
        """A validated network; ``conductance`` defaults to no links, ``fixed`` to none."""
        import scipy.sparse as sp

        n = len(names)
        capacity = np.asarray(capacity, float).reshape(-1)
        if capacity.shape != (n,) or not np.isfinite(capacity).all() or (capacity < 0).any():
            raise NetworkError(f"capacity must be {n} finite values >= 0 [J/K]")
        ex = sp.csr_matrix(exchange, dtype=float)
        if ex.shape != (n, n) or not np.isfinite(ex.data).all() or (ex.data < 0).any():
            raise NetworkError(f"exchange areas must be an ({n}, {n}) matrix of finite "
                               f"values >= 0 [m2]")
        ex = ((ex + ex.T) * 0.5).tocsr()
        ex.setdiag(0.0)
        ex.eliminate_zeros()
        es = np.asarray(exchange_space, float).reshape(-1)
        if es.shape != (n,) or not np.isfinite(es).all() or (es < 0).any():
            raise NetworkError(f"exchange_space must be {n} finite values >= 0 [m2]")
        g = sp.csr_matrix((n, n)) if conductance is None else sp.csr_matrix(conductance,
                                                                             dtype=float)
        if g.shape != (n, n) or not np.isfinite(g.data).all() or (g.data < 0).any():
            raise NetworkError(f"conductances must be an ({n}, {n}) matrix of finite values "
                               f">= 0 [W/K]")
        g = ((g + g.T) * 0.5).tocsr()
        g.setdiag(0.0)
        g.eliminate_zeros()
        fx = np.full(n, np.nan) if fixed is None else np.asarray(fixed, float).reshape(-1)
        if fx.shape != (n,) or (np.isfinite(fx) & (fx <= 0)).any():
            raise NetworkError(f"fixed temperatures must be {n} values, NaN (free) or > 0 K")
        return cls(tuple(names), capacity, g, ex, es, fx, float(space_temperature))


def _balance(net: Network, T, Q):
    """Net heat flow into every node [W] and its Jacobian d(flow)/dT (sparse)."""
    import scipy.sparse as sp

    s = STEFAN_BOLTZMANN
    T4 = T ** 4
    g, ex = net.conductance, net.exchange
    flow = (Q + g @ T - np.asarray(g.sum(axis=1)).ravel() * T
            + s * (ex @ T4 - np.asarray(ex.sum(axis=1)).ravel() * T4)
            + s * net.exchange_space * (net.space_temperature ** 4 - T4))
    d4 = 4.0 * s * T ** 3
    row_g = np.asarray(g.sum(axis=1)).ravel()
    row_e = np.asarray(ex.sum(axis=1)).ravel()
    jac = (g + ex.multiply(d4[None, :]) - sp.diags(row_g + (row_e + net.exchange_space)
                                                    * d4)).tocsc()
    return flow, jac


def _free_solve(jac, rhs, free):
    from scipy.sparse.linalg import spsolve

    sub = jac[free][:, free]
    return np.asarray(spsolve(sub.tocsc(), rhs[free])).reshape(-1)


def steady_state(net: Network, loads, initial=None, tol=1e-9, max_iterations=200):
    """Steady temperatures for constant loads (Newton's method, damped).

    Parameters
    ----------
    net : Network
    loads : (n,) float — constant heat load per node [W] (e.g. orbit averages)
    initial : (n,) float, optional — starting temperatures [K] (default 280 K)
    tol : float — stop when the largest change is below ``tol`` times the temperature

    Returns
    -------
    (n,) float — temperatures [K]

    Raises
    ------
    NetworkError
        A free node without a path to a sink (no coupling at all), or no convergence.
    """
    n = net.n
    Q = np.asarray(loads, float).reshape(-1)
    if Q.shape != (n,) or not np.isfinite(Q).all():
        raise NetworkError(f"loads must be {n} finite values [W]")
    fixed = np.isfinite(net.fixed)
    free = ~fixed
    coupled = (np.asarray(abs(net.conductance).sum(axis=1)).ravel()
               + np.asarray(net.exchange.sum(axis=1)).ravel() + net.exchange_space) > 0
    lonely = free & ~coupled
    if lonely.any():
        raise NetworkError(f"node {net.names[int(np.flatnonzero(lonely)[0])]!r} has no "
                           f"conductive or radiative coupling: its steady temperature is "
                           f"undefined")
    T = np.full(n, 280.0) if initial is None else np.array(initial, float)
    T[fixed] = net.fixed[fixed]
    for _ in range(max_iterations):
        flow, jac = _balance(net, T, Q)
        step = -_free_solve(jac, flow, free)
        # damp: never more than halve or double a temperature in one step
        scale = np.max(np.abs(step) / (0.5 * T[free])) if step.size else 0.0
        if scale > 1.0:
            step = step / scale
        T[free] += step
        if not np.all(T[free] > 0):
            raise NetworkError("steady state: temperatures left the positive range")
        if np.max(np.abs(step) / T[free], initial=0.0) < tol:
            return T
    raise NetworkError(f"steady state did not converge in {max_iterations} Newton steps")


def temperature_sensitivity(net: Network, T):
    """d T / d Q at a steady state: (n, n) dense, column j = change of every temperature
    per watt added at node j [K/W] (zero rows and columns at fixed nodes).

    The linearisation of the balance ``f(T, Q) = 0`` gives ``dT = -J^-1 dQ`` on the free
    nodes (implicit function theorem).
    """
    n = net.n
    free = ~np.isfinite(net.fixed)
    _, jac = _balance(net, np.asarray(T, float), np.zeros(n))
    sub = jac[free][:, free].toarray()
    out = np.zeros((n, n))
    out[np.ix_(free, free)] = -np.linalg.inv(sub)
    return out


@dataclass(frozen=True)
class TransientResult:
    """Temperatures over the last orbit of a cyclic transient.

    Attributes
    ----------
    time : (t,) float — times within the orbit [s]
    temperature : (t, n) float [K]
    orbits : int — orbits integrated until the cycle repeated
    change : float — largest |T(end) - T(start)| of the last orbit [K]
    duty : (h,) float — share of the last orbit each heater was on [1]
    """

    time: np.ndarray
    temperature: np.ndarray
    orbits: int
    change: float
    duty: np.ndarray = None


def _one_orbit(rhs_base, jac, T, free, samples, period, heaters, state, cap, rtol, atol):
    """One orbit from ``T`` with the heaters in ``state``, stopping at every switch.

    Returns (temperatures of the free nodes at ``samples`` (s, f), on-time of each heater
    [s], end temperatures (f,), end heater state)."""
    from scipy.integrate import solve_ivp

    n_free = int(free.sum())
    index = np.cumsum(free) - 1                    # node -> position among the free
    rows = np.empty((samples.size, n_free))
    on_time = np.zeros(len(heaters))
    t0, y = 0.0, T[free].copy()
    state = state.copy()
    rows[0] = y
    done = 1
    while True:
        extra = np.zeros(T.size)
        for k, h in enumerate(heaters):
            if state[k]:
                extra[h.node] += h.power
        events = []
        for k, h in enumerate(heaters):
            if not free[h.node]:
                continue
            level = h.off if state[k] else h.on
            j = int(index[h.node])

            def crossing(t, yy, j=j, level=level):
                return yy[j] - level
            crossing.terminal = True
            crossing.direction = 1.0 if state[k] else -1.0
            events.append((k, crossing))
        wanted = samples[(samples > t0) & (samples <= period)]
        sol = solve_ivp(lambda t, yy: rhs_base(t, yy, extra), (t0, period), y, method="BDF",
                        t_eval=wanted, jac=jac, rtol=rtol, atol=atol,
                        events=[e for _, e in events] or None)
        if not sol.success:
            raise NetworkError(f"transient: the integrator failed ({sol.message})")
        got = np.asarray(sol.y, dtype=float).reshape(n_free, -1).T
        rows[done:done + got.shape[0]] = got
        done += got.shape[0]
        switched = [(k, float(sol.t_events[i][0])) for i, (k, _) in enumerate(events)
                    if sol.status == 1 and sol.t_events[i].size]
        if switched:
            k, t_switch = min(switched, key=lambda x: x[1])
            on_time += np.where(state, t_switch - t0, 0.0)
            y = np.asarray(sol.y_events[[i for i, (kk, _) in enumerate(events)
                                         if kk == k][0]][0], dtype=float)
            state[k] = not state[k]
            t0 = t_switch
            if t0 >= period:
                break
            continue
        on_time += np.where(state, period - t0, 0.0)
        y = got[-1] if got.shape[0] else np.asarray(sol.y, float).reshape(n_free, -1)[:, -1]
        break
    return rows, on_time, y, state


def steady_with_heaters(net: Network, loads, heaters=(), tol=1e-9):
    """Steady temperatures with thermostat heaters (:class:`vfactor.netmodel.Heater`):
    a heater whose node would sit below the middle of its band gives the power that holds
    it there, up to its ``power`` (the orbit average of an on/off thermostat that keeps
    cycling; common practice for steady estimates).

    Returns ((n,) temperatures [K], (h,) heater powers [W]).
    """
    Q = np.asarray(loads, float).reshape(-1).copy()
    mode = ["off"] * len(heaters)          # off | held | full
    power = np.zeros(len(heaters))
    T = None
    for _ in range(2 * len(heaters) + 3):
        fixed = net.fixed.copy()
        q = Q.copy()
        for k, h in enumerate(heaters):
            if mode[k] == "held":
                fixed[h.node] = 0.5 * (h.on + h.off)
            elif mode[k] == "full":
                q[h.node] += h.power
        held = Network(net.names, net.capacity, net.conductance, net.exchange,
                       net.exchange_space, fixed, net.space_temperature)
        T = steady_state(held, q, initial=T, tol=tol)
        flow, _ = _balance(held, T, q)
        changed = False
        for k, h in enumerate(heaters):
            mid = 0.5 * (h.on + h.off)
            want = {"off": "held" if T[h.node] < mid else "off",
                    "full": "held" if T[h.node] > mid else "full"}.get(mode[k])
            if mode[k] == "held":
                need = -flow[h.node]        # what the node must get to stay at mid
                want = "off" if need <= 0 else ("full" if need > h.power else "held")
                power[k] = min(max(need, 0.0), h.power)
            elif mode[k] == "full":
                power[k] = h.power
            else:
                power[k] = 0.0
            if want != mode[k]:
                mode[k], changed = want, True
        if not changed:
            return T, power
    raise NetworkError("steady state: the heaters' switching did not settle")


def cyclic_transient(net: Network, time, loads, period, initial=None, tol=0.01,
                     max_orbits=50, rtol=1e-6, atol=1e-4, heaters=(),
                     dissipation=None) -> TransientResult:
    """Temperatures under periodic loads, repeated until the orbit repeats itself.

    Parameters
    ----------
    net : Network — every free node needs a capacity > 0
    time : (t,) float — sample times of the loads within one period, from 0 [s]
    loads : (t, n) float — loads at those times [W]; linear between samples, periodic
    period : float — orbit period [s]
    initial : (n,) float, optional — temperatures at t = 0 of the first orbit (default: the
        steady state of the orbit-average loads, which shortens the approach)
    tol : float — the cycle is reached when no temperature changes more than this over one
        orbit [K] (with heaters switching out of step with the orbit: when no orbit-average
        temperature changes more than this from one orbit to the next)
    rtol, atol : float — tolerances of the BDF integrator (scipy.integrate.solve_ivp)
    heaters : sequence of :class:`vfactor.netmodel.Heater` — each switches on when its node
        falls below ``on`` and off when it rises above ``off`` (the switching times are
        found as events of the integration, so the integrator never steps over them)
    dissipation : callable t -> (n,) [W], optional — internal power added to the loads

    Returns
    -------
    TransientResult (the last orbit, at the load sample times plus the period)
    """
    from scipy.integrate import solve_ivp

    n = net.n
    t_in = np.asarray(time, float).reshape(-1)
    q_in = np.asarray(loads, float)
    if q_in.shape != (t_in.size, n) or not np.isfinite(q_in).all():
        raise NetworkError(f"loads must be ({t_in.size}, {n}) finite values [W]")
    if not (period > 0 and t_in[0] == 0 and t_in[-1] < period and np.all(np.diff(t_in) > 0)):
        raise NetworkError("load times must start at 0 and increase within one period")
    free = ~np.isfinite(net.fixed)
    if np.any(net.capacity[free] <= 0):
        bad = net.names[int(np.flatnonzero(free & (net.capacity <= 0))[0])]
        raise NetworkError(f"node {bad!r} has no heat capacity: a transient needs one")
    t_ext = np.concatenate([t_in, [t_in[0] + period]])
    q_ext = np.vstack([q_in, q_in[:1]])

    slope = np.diff(q_ext, axis=0) / np.diff(t_ext)[:, None]

    def load_at(t):
        tau = min(max(t % period, t_ext[0]), t_ext[-1])
        k = min(int(np.searchsorted(t_ext, tau, side="right")) - 1, len(t_in) - 1)
        return q_ext[k] + (tau - t_ext[k]) * slope[k]

    weights = np.diff(t_ext)
    mids = 0.5 * (q_ext[1:] + q_ext[:-1])
    average = (mids * weights[:, None]).sum(axis=0) / period
    T = steady_state(net, average) if initial is None else np.array(initial, float)
    T[~free] = net.fixed[~free]
    cap = np.where(free, net.capacity, 1.0)

    def rhs_base(t, y, extra):
        full = T.copy()
        full[free] = y
        q = load_at(t) + extra
        if dissipation is not None:
            q = q + dissipation(t)
        flow, _ = _balance(net, full, q)
        return flow[free] / cap[free]

    def jac(t, y):
        full = T.copy()
        full[free] = y
        _, j = _balance(net, full, np.zeros(n))
        sub = j[free][:, free]
        return (sub.multiply(1.0 / cap[free][:, None])).tocsc()

    samples = np.concatenate([t_in, [period]])
    state = np.array([T[h.node] < 0.5 * (h.on + h.off) for h in heaters], dtype=bool)
    mean = None
    for orbit in range(1, max_orbits + 1):
        start, start_state = T[free].copy(), state.copy()
        rows, on_time, T_free, state = _one_orbit(rhs_base, jac, T, free, samples, period,
                                                  heaters, state, cap, rtol, atol)
        change = float(np.max(np.abs(T_free - start), initial=0.0))
        T[free] = T_free
        # a thermostat that is not in step with the orbit never repeats it exactly: then
        # the orbit averages settling count as the cycle reached
        previous, mean = mean, (0.5 * (rows[1:] + rows[:-1]) * np.diff(samples)[:, None]).sum(
            axis=0) / period
        settled = previous is not None and bool(np.any(on_time > 0)) and float(
            np.max(np.abs(mean - previous), initial=0.0)) < tol
        if (change < tol and np.array_equal(state, start_state)) or settled:
            temps = np.tile(T, (samples.size, 1))
            temps[:, free] = rows
            return TransientResult(samples, temps, orbit, change, on_time / period)
    raise NetworkError(f"transient: no cyclic steady state within {max_orbits} orbits "
                       f"(last change {change:.3g} K)")
