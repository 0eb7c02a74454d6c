"""``vfactor solve``: quick-look temperatures from a results file, with their statistical
error.

The network (:mod:`vfactor.network`) is built from the file: nodes and areas, the
infrared exchange areas ``eps_i A_i B_ij`` and to space, the heat loads per step (solar +
albedo + planet IR), and the model's ``[network]`` section (:mod:`vfactor.netmodel`:
capacities, dissipation, fixed nodes, conductive links, heaters, blankets). Two solves:

* **steady state** under the orbit-average loads (Newton on the sparse balance, heaters
  holding the middle of their band up to their power);
* **cyclic transient** over the orbit, repeated until no node changes more than
  ``tolerance_K`` from one orbit to the next (implicit BDF integrator of scipy, sparse
  Jacobian, heater switches as events).

**Statistical error.** The loads and couplings are Monte Carlo estimates; their one-sigma
errors are carried to the temperatures by the linearised sensitivity of the steady
balance (implicit function theorem: ``dT = -J^-1 dQ``): a load error ``s_Q`` at node j
gives ``S_ij s_Q`` at node i; an exchange-area error ``s_A`` of the pair (j, k) changes
the flow ``sigma (T_k^4 - T_j^4) s_A`` into j and out of k. Independent contributions add
in quadrature (first-order propagation of uncertainty, e.g. JCGM 100:2008 "Guide to the
expression of uncertainty in measurement", section 5.1). The per-step load errors of one
node are taken as fully correlated in time (the same cached rays serve every step), so
the orbit average carries the time average of the per-step errors. The transient's error
is reported as that of the steady state (the same linearisation), a first-order estimate.

This is a quick-look solve for checking the couplings and loads, not a substitute for the
project's verified thermal model.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .constants import STEFAN_BOLTZMANN
from .errors import ArgumentError, VfactorError

__all__ = ["Temperatures", "solve_results", "write_temperatures", "solve_file",
           "format_temperatures", "ERROR_NODE_LIMIT"]

ERROR_NODE_LIMIT = 3000
"""Above this many nodes the error propagation (a dense n x n sensitivity) is skipped."""


@dataclass(frozen=True)
class Temperatures:
    """The temperatures of one case (SI units).

    Attributes
    ----------
    names : tuple of str
    steady, steady_stderr : (n,) [K] — orbit-average loads; one-sigma statistical error
    time : (s,) [s] — the last orbit's sample times (the load steps and the period)
    transient : (s, n) [K]
    orbits : int; change : float [K] — orbits until the cycle repeated; its last change
    capacity : (n,) [J/K]; defaulted : (n,) bool
    heaters : tuple of str — heater node names; heater_steady : (h,) [W]; duty : (h,) [1]
    sun_fraction : (s,) [1] — at the sample times (shading of the figure)
    notes : tuple of str
    """

    names: tuple
    steady: np.ndarray
    steady_stderr: np.ndarray
    time: np.ndarray
    transient: np.ndarray
    orbits: int
    change: float
    capacity: np.ndarray
    defaulted: np.ndarray
    heaters: tuple
    heater_steady: np.ndarray
    duty: np.ndarray
    sun_fraction: np.ndarray
    notes: tuple = ()


def _network(results, spec):
    import scipy.sparse as sp

    from .network import Network

    g = results.geometry
    n = g.n_nodes
    ex = sp.csr_matrix(results.exchange.area, dtype=float).tolil()
    for a, b, area in spec.blankets:
        ex[int(a), int(b)] += area
        ex[int(b), int(a)] += area
    cond = sp.lil_matrix((n, n))
    for a, b, value in spec.links:
        cond[int(a), int(b)] += value
        cond[int(b), int(a)] += value
    return Network.build(g.nodes.names, spec.capacity, ex.tocsr(),
                         np.asarray(results.exchange.area_space, float), cond.tocsr(),
                         spec.fixed)


def _one_orbit(results):
    """(time (t,) from 0, loads (t, n), sun fraction (t,), period) of the first orbit."""
    tr, heat = results.trajectory, results.heating
    period = float(results.orbit_attrs.get("period_s", tr.period))
    t = np.asarray(tr.time, float) - float(tr.time[0])
    keep = t < period * (1.0 - 1e-9)
    total = heat.node_solar + heat.node_albedo + heat.node_planet_ir
    return t[keep], total[keep], np.asarray(tr.sun_fraction)[keep], period


def _load_sigma(results, keep_steps):
    heat = results.heating
    parts = [getattr(heat, f"node_{s}_stderr", None) for s in ("solar", "albedo", "planet_ir")]
    if any(p is None for p in parts):
        return None
    solar, albedo, ir = (np.asarray(p)[:keep_steps] for p in parts)
    # albedo and planet IR share the planet rays: add them before the quadrature sum
    return np.sqrt(solar ** 2 + (albedo + ir) ** 2).mean(axis=0)


def _steady_error(net, T, results, sigma_q):
    """One-sigma steady temperature error from the loads and the couplings [K]."""
    import scipy.sparse as sp

    from .network import temperature_sensitivity

    S = temperature_sensitivity(net, T)
    var = np.zeros(net.n)
    if sigma_q is not None:
        var += (S ** 2) @ (sigma_q ** 2)
    ex = results.exchange
    g = results.geometry
    if ex is not None and ex.stderr is not None:
        eps_area = np.asarray(g.nodes.ir_emissivity) * np.asarray(g.nodes.area)
        sig_b = sp.csr_matrix(ex.stderr).tocoo()
        s_pair = eps_area[sig_b.row] * sig_b.data            # error of A_ij = eps A B_ij
        # the network uses (A_ij + A_ji) / 2: each directed entry carries half its error
        j, k = sig_b.row, sig_b.col
        off = j != k
        j, k, s_pair = j[off], k[off], 0.5 * s_pair[off]
        dflow = STEFAN_BOLTZMANN * (T[k] ** 4 - T[j] ** 4) * s_pair
        for start in range(0, j.size, 20000):
            sl = slice(start, start + 20000)
            d = S[:, j[sl]] - S[:, k[sl]]                   # into j, out of k
            var += (d ** 2) @ (dflow[sl] ** 2)
    vf = results.view_factors
    if vf is not None and getattr(vf, "stderr_space", None) is not None:
        eps_area = np.asarray(g.nodes.ir_emissivity) * np.asarray(g.nodes.area)
        s_space = eps_area * np.asarray(vf.stderr_space, float)
        dflow = STEFAN_BOLTZMANN * (net.space_temperature ** 4 - T ** 4) * s_space
        var += (S ** 2) @ (dflow ** 2)
    return np.sqrt(var)


def solve_results(results, spec=None, model_text=None) -> Temperatures:
    """Steady and cyclic temperatures of ``results`` (one case) with the network ``spec``
    (:class:`vfactor.netmodel.NetworkSpec`; default: read from ``model_text``, or the
    model stored in the results)."""
    import tomllib

    from .h5io import node_averages
    from .netmodel import network_from_table
    from .network import NetworkError, cyclic_transient, steady_with_heaters

    if results.heating is None or results.exchange is None:
        raise ArgumentError(f"{results.path}: has no heat loads (the model has no [orbit]) "
                            "or no exchange factors: nothing to solve")
    g = results.geometry
    notes = []
    if spec is None:
        text = model_text if model_text is not None else results.model_source
        table = tomllib.loads(text).get("network")
        spec = network_from_table(table, g.nodes.names, g.nodes.area,
                                  file=str(results.path) + " (its model's [network])")
        if table is None:
            notes.append("the model has no [network] section: every node gets the default "
                         "heat capacity, no dissipation, links or heaters")
    if spec.defaulted.any():
        notes.append(f"{int(spec.defaulted.sum())} of {g.n_nodes} nodes have the default heat "
                     f"capacity ({spec.areal_capacity:g} J K-1 m-2 x area); give real values "
                     "in [[network.nodes]]")
    if results.hinges is not None:
        notes.append("parts turn: the radiative couplings are those of the model as built "
                     "(every hinge at 0), the loads those of the turning vehicle")
    net = _network(results, spec)
    t, loads, sun_fraction, period = _one_orbit(results)
    average = node_averages(loads, t) if t.size > 1 else loads[0]
    dissipation_avg = spec.power + _schedule_average(spec, period)
    try:
        steady, heater_power = steady_with_heaters(net, average + dissipation_avg,
                                                   spec.heaters)
        if g.n_nodes <= ERROR_NODE_LIMIT:
            sigma = _steady_error(net, steady, results, _load_sigma(results, t.size))
        else:
            sigma = np.full(g.n_nodes, np.nan)
            notes.append(f"more than {ERROR_NODE_LIMIT} nodes: the temperature error is not "
                         "propagated (dense sensitivity)")
        transient = cyclic_transient(net, t, loads, period, initial=steady,
                                     tol=spec.tolerance, max_orbits=spec.max_orbits,
                                     heaters=spec.heaters,
                                     dissipation=lambda tt: spec.dissipation(tt, period))
    except NetworkError as exc:
        raise VfactorError(f"{results.path}: temperature solve: {exc}") from None
    fixed = np.isfinite(spec.fixed)
    sigma = np.where(fixed, 0.0, sigma)
    return Temperatures(
        names=tuple(g.nodes.names), steady=steady, steady_stderr=sigma,
        time=transient.time, transient=transient.temperature, orbits=transient.orbits,
        change=transient.change, capacity=spec.capacity, defaulted=spec.defaulted,
        heaters=tuple(g.nodes.names[h.node] for h in spec.heaters),
        heater_steady=np.asarray(heater_power, float),
        duty=np.asarray(transient.duty if transient.duty is not None else [], float),
        sun_fraction=np.concatenate([sun_fraction, sun_fraction[:1]]), notes=tuple(notes))


def _schedule_average(spec, period):
    out = np.zeros(spec.power.shape)
    for node, times, powers in spec.schedules:
        edges = np.append(times[times < period], period)
        out[node] += float(np.sum(powers[:edges.size - 1] * np.diff(edges)) / period)
    return out


def write_temperatures(path, solved) -> None:
    """Add ``/temperatures`` (or ``/cases/CASE/temperatures``) of every (case name,
    Temperatures) of ``solved`` to the results file ``path``, replacing an earlier solve;
    written atomically (a copy in memory, then the whole file through
    :func:`vfactor.atomic.write_bytes`)."""
    from .atomic import write_bytes
    from .h5io import _put
    from .h5schema import h5py_quiet

    h5py = h5py_quiet()
    path = Path(path)
    image = io.BytesIO(path.read_bytes())
    with h5py.File(image, "r+") as h:
        for case, temps in solved:
            _write_group(h[f"cases/{case}"] if case else h, temps, _put)
    write_bytes(path, image.getbuffer(), "the results file")


def _write_group(parent, temps, _put):
    """The ``temperatures`` group of one case under ``parent``."""
    if "temperatures" in parent:
        del parent["temperatures"]
    g = parent.create_group("temperatures")
    g.attrs["orbits"] = int(temps.orbits)
    g.attrs["change_K"] = float(temps.change)
    g.attrs["note"] = ("quick-look solve for checking the couplings and loads, not a "
                       "substitute for the project's verified thermal model")
    _put(g, "steady", temps.steady, "K", "steady temperature under the orbit-average loads")
    _put(g, "steady_stderr", temps.steady_stderr, "K",
         "one-sigma statistical error of the steady temperature (loads and couplings)")
    _put(g, "time", temps.time, "s", "sample times of the last orbit of the transient")
    _put(g, "transient", temps.transient, "K", "temperature per sample time and node, "
                                               "cyclic steady state over the orbit")
    _put(g, "capacity", temps.capacity, "J/K", "heat capacity used per node")
    _put(g, "capacity_defaulted", temps.defaulted.astype(np.int8), "1",
         "1 where the capacity is the areal default")
    _put(g, "heater_node", list(temps.heaters), "", "node of each heater")
    _put(g, "heater_steady", temps.heater_steady, "W", "heater power in the steady state")
    _put(g, "heater_duty", temps.duty, "1", "share of the last orbit each heater was on")


def solve_file(path, *, case=None, model=None, reporter=None) -> list:
    """Solve every case of the results file ``path`` (or ``case``); ``model``: a model
    file whose ``[network]`` section replaces the stored one. Returns [(Results,
    Temperatures)] and writes each into the file."""
    from .h5read import read_results

    first = read_results(path, case=case)
    every = [first] + ([read_results(path, case=c) for c in first.case_names[1:]]
                       if first.case_names and case is None else [])
    text = None
    if model is not None:
        try:
            text = Path(model).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise ArgumentError(f"{model}: cannot read the model file: {exc}") from None
    from .progress import NullReporter

    reporter = reporter or NullReporter()
    out = []
    with reporter.stage("temperatures (steady, then orbits to the cyclic state)",
                        total=len(every), unit="cases") as bar:
        for results in every:
            out.append((results, solve_results(results, model_text=text)))
            bar.advance(1)
    # only after every case solved, in one write: nothing half-written
    write_temperatures(path, [(results.case, temps) for results, temps in out])
    return out


def format_temperatures(solved) -> str:
    """The table ``vfactor solve`` prints: per node the steady temperature with its
    one-sigma error and the transient's minimum, average and maximum over the orbit."""
    import textwrap

    from .h5io import node_averages
    from .summarytext import _table

    lines = []
    for results, temps in solved:
        title = f"case {results.case}" if results.case else "the model"
        lines += [f"Quick-look temperatures of {title} [K] (steady: orbit-average loads; "
                  f"orbit: cyclic transient after {temps.orbits} orbit(s), last change "
                  f"{temps.change:.2g} K)"]
        avg = node_averages(temps.transient[:-1], temps.time[:-1]) if temps.time.size > 2 \
            else temps.transient[0]
        rows = []
        for i, name in enumerate(temps.names):
            err = temps.steady_stderr[i]
            rows.append((name, f"{temps.steady[i]:.2f} +- {err:.2f}" if np.isfinite(err)
                         else f"{temps.steady[i]:.2f}",
                         f"{temps.transient[:, i].min():.2f}", f"{avg[i]:.2f}",
                         f"{temps.transient[:, i].max():.2f}",
                         f"{temps.capacity[i]:.4g}" + (" (default)" if temps.defaulted[i]
                                                       else "")))
        lines += _table(["node", "steady +- 1 sigma", "orbit min", "orbit avg", "orbit max",
                         "capacity [J/K]"], rows)
        for h, name in enumerate(temps.heaters):
            lines.append(f"  heater on {name}: {temps.heater_steady[h]:.3g} W in the steady "
                         f"state, on {100 * temps.duty[h]:.0f} % of the orbit")
        for note in temps.notes:
            lines += textwrap.wrap(f"note: {note}", width=92, initial_indent="  ",
                                   subsequent_indent="    ")
        lines.append("")
    lines += textwrap.wrap(
        "Caution: a quick-look solve for checking the couplings and loads, not a substitute "
        "for the project's verified thermal model; the +- is the statistical error of the "
        "Monte Carlo couplings and loads only (not of the capacities, links or environment). "
        "Follow the applicable project standards and licensed engineering practice.",
        width=92)
    return "\n".join(lines) + "\n"
