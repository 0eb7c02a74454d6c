"""CSV tables of ``vfactor export --format csv``: what a thermal network solver reads.

Two kinds of table (every column, unit and file is listed in the README, "CSV layout"):

*Long tables*, one row per node, node pair or (step, node): ``nodes.csv``,
``couplings.csv`` (ordered pairs at or above a threshold), ``heat_loads.csv``,
``hinges.csv`` and ``couplings_position_K.csv``.

*Solver tables*, in the shape a network solver takes as it is:

``conductances.csv``
    Radiative conductors: one row per unordered node pair ``a < b`` with a non-zero
    exchange area, the symmetric exchange area and conductance, the view factors both ways
    with their one-sigma errors; then one row per node to ``space``
    (:func:`conductor_pairs`).
``loads_<source>.csv``, ``flux_<source>.csv``, ``incident_<source>.csv``,
``planet_view_unblocked.csv``
    Wide tables along the orbit: one row per step, columns ``time [s]``,
    ``sun_fraction [1]`` and one column per node (absorbed power [W], absorbed flux
    [W m-2], incident power [W], view factor to the planet [1]). When the steps are evenly
    spaced and cover whole orbits, a closing row at ``time[0] + m * period`` repeats step 0
    (:func:`closing_time`), so that periodic interpolation needs no wrap-around.

One header line, comma-separated, the unit of every numeric column in square brackets
(``area [m2]``); numbers at full float64 precision (``repr``), so they read back bit for bit.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import NamedTuple

import numpy as np

from . import atomic
from .constants import STEFAN_BOLTZMANN
from .errors import ArgumentError
from .h5read import Results
from .heating import SOURCES
from .sparsetools import as_csr, values_at

__all__ = ["DEFAULT_THRESHOLD", "SPACE", "export_csv", "table_names", "ConductorPairs",
           "conductor_pairs", "closing_time", "per_area", "planet_view_factor",
           "write_table", "inputs_of", "REFUSE_HINT"]

DEFAULT_THRESHOLD = 1e-4
"""Smallest view factor or Gebhart factor [1] for a node pair to be listed in couplings.csv."""

SPACE = "space"
"""``node_b`` of the conductor from a node to deep space in ``conductances.csv``."""

REFUSE_HINT = "give the export another name or folder"
"""How to fix an export refused because it would replace its input."""

_SPACING_TOLERANCE = 1e-6
"""Evenly spaced steps and whole orbits are recognised to this share of a step and of a
period [1] (the rule of :func:`vfactor.trajectory.orbit_facts` for a periodic span)."""


# ---------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------
def _fmt(x) -> str:
    if isinstance(x, str):
        return x
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    return repr(float(x))  # shortest text that reads back to the same float64


def write_table(batch: atomic.Batch, path: Path, header, rows, what: str) -> Path:
    """One table into ``batch`` (renamed into place with the others when all are done)."""
    with batch.open(path, what, text=True, newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([_fmt(c) for c in r])
    return path


def inputs_of(results: Results) -> list:
    """Files an export must not replace: the results file it reads."""
    return [results.path] if getattr(results, "path", None) else []


# ---------------------------------------------------------------------------------------
# Pure array functions
# ---------------------------------------------------------------------------------------
class ConductorPairs(NamedTuple):
    """Radiative conductors between nodes, one per unordered pair (see
    :func:`conductor_pairs`).

    Attributes
    ----------
    node_a, node_b : (p,) int64 — node indices, ``node_a < node_b`` (``<=`` with self terms)
    exchange_area : (p,) float — symmetric exchange area [m2]
    view_factor_ab, view_factor_ab_stderr : (p,) float — F from a to b and its one-sigma
        error [1]
    view_factor_ba, view_factor_ba_stderr : (p,) float — F from b to a and its one-sigma
        error [1]
    """

    node_a: np.ndarray
    node_b: np.ndarray
    exchange_area: np.ndarray
    view_factor_ab: np.ndarray
    view_factor_ab_stderr: np.ndarray
    view_factor_ba: np.ndarray
    view_factor_ba_stderr: np.ndarray


def conductor_pairs(view_factors, exchange, *, self_terms: bool = False) -> ConductorPairs:
    """Node pairs of a conductor network, symmetric by construction.

    Parameters
    ----------
    view_factors : vfactor.couplings.ViewFactors — ``matrix`` and ``stderr`` (n, n) [1]
    exchange : vfactor.couplings.Exchange — ``area`` (n, n), ``eps_i A_i B_ij`` [m2]
    self_terms : bool — also list ``a == b`` (a node's exchange with itself; it carries no
        net heat between two temperatures, so a solver may drop it)

    Returns
    -------
    ConductorPairs
        Every pair with a stored entry either way whose symmetric exchange area is not
        zero, sorted by ``node_a`` then ``node_b``.

    Notes
    -----
    For a diffuse grey enclosure ``eps_i A_i B_ij = eps_j A_j B_ji`` (reciprocity of the
    Gebhart factors; B. Gebhart 1961, Int. J. Heat Mass Transfer 3, 341-346). Monte Carlo
    estimates of the two sides differ by their statistical error; the conductor between
    ``a`` and ``b`` uses their mean ``(eps_a A_a B_ab + eps_b A_b B_ba) / 2`` (common
    practice). Since the sum of two floats does not depend on their order, the value is
    the same bit for bit whichever node is called ``a``.
    """
    area = as_csr(exchange.area)
    coo = area.tocoo()
    rows = np.concatenate([coo.row, coo.col]).astype(np.int64)
    cols = np.concatenate([coo.col, coo.row]).astype(np.int64)
    keep = rows <= cols if self_terms else rows < cols
    n = area.shape[0]
    key = np.unique(rows[keep] * n + cols[keep])  # sorted: by node_a, then node_b
    a, b = key // n, key % n
    symmetric = (values_at(area, a, b) + values_at(area, b, a)) / 2.0
    nonzero = symmetric != 0.0
    a, b, symmetric = a[nonzero], b[nonzero], symmetric[nonzero]
    f, err = as_csr(view_factors.matrix), as_csr(view_factors.stderr)
    return ConductorPairs(node_a=a, node_b=b, exchange_area=symmetric,
                          view_factor_ab=values_at(f, a, b),
                          view_factor_ab_stderr=values_at(err, a, b),
                          view_factor_ba=values_at(f, b, a),
                          view_factor_ba_stderr=values_at(err, b, a))


def closing_time(time, period) -> float | None:
    """Time of the closing row of a periodic table, or None when the steps are not periodic.

    Parameters
    ----------
    time : (t,) float — time of each step [s]
    period : float — orbital period [s]

    Returns
    -------
    float or None
        ``time[0] + m * period`` when the steps are evenly spaced (every gap within
        1e-6 of a step of the mean gap) and ``t`` steps of that gap span exactly ``m >= 1``
        whole periods (within 1e-6 of a period); None otherwise, and for fewer than two
        steps.

    Notes
    -----
    Step ``t`` (the closing row) then falls on the same orbit position, and under a
    periodic load the same load, as step 0: our own rule, the one
    :func:`vfactor.trajectory.orbit_facts` applies to call a span periodic.
    """
    time = np.asarray(time, dtype=np.float64)
    period = float(period)
    if time.size < 2 or not period > 0.0:
        return None
    step = float(time[-1] - time[0]) / (time.size - 1)
    if not step > 0.0:
        return None
    if np.max(np.abs(np.diff(time) - step)) > _SPACING_TOLERANCE * step:
        return None
    span = time.size * step
    turns = round(span / period)
    if turns < 1 or abs(span - turns * period) > _SPACING_TOLERANCE * period:
        return None
    return float(time[0]) + turns * period


def per_area(power, area) -> np.ndarray:
    """Power per unit area, 0 where the area is 0.

    Parameters
    ----------
    power : (t, n) float — power per step and node [W]
    area : (n,) float — node area [m2]

    Returns
    -------
    (t, n) float — ``power / area`` [W m-2]
    """
    power = np.asarray(power, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    safe = np.where(area > 0.0, area, 1.0)
    return np.where(area > 0.0, power / safe, 0.0)


def planet_view_factor(incident_planet_ir, planet_ir, area) -> np.ndarray:
    """View factor from each node to the planet, unblocked by the vehicle, per step.

    Parameters
    ----------
    incident_planet_ir : (t, n) float — planet IR power incident on each node [W]
    planet_ir : float — planet outgoing long-wave flux [W m-2], > 0
    area : (n,) float — node area [m2]

    Returns
    -------
    (t, n) float — ``F = Q / (E A)`` [1], 0 where the area is 0

    Raises
    ------
    ArgumentError
        ``planet_ir`` is not positive (the incident power then carries no view factor).

    Notes
    -----
    The heating stage computes ``Q = E A F`` for a Lambertian planet of uniform outgoing
    flux ``E`` with the rays of each side that reach the planet past the vehicle (see
    :mod:`vfactor.heating`), so ``Q / (E A)`` is that estimate of the node's view factor
    to the planet, the part blocked by the vehicle left out (definition of the view
    factor; Siegel & Howell, Thermal Radiation Heat Transfer, 4th ed., ch. 4, from memory).
    """
    if not planet_ir > 0.0:
        raise ArgumentError(f"the planet IR flux must be > 0 W m-2 for a view factor to the "
                            f"planet, got {planet_ir!r}")
    incident = np.asarray(incident_planet_ir, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    safe = np.where(area > 0.0, area, 1.0)
    return np.where(area > 0.0, incident / (float(planet_ir) * safe), 0.0)


# ---------------------------------------------------------------------------------------
# The folder of tables
# ---------------------------------------------------------------------------------------
def _has_planet_view(results: Results) -> bool:
    return results.heating is not None and results.heating.planet_ir > 0.0


def table_names(results: Results) -> list:
    """File names :func:`export_csv` writes for ``results``, in writing order."""
    names = ["nodes.csv"]
    if results.view_factors is not None:
        names.append("couplings.csv")
        if results.exchange is not None:
            names.append("conductances.csv")
    if results.positions is not None:
        names += [f"couplings_position_{p}.csv" for p in range(len(results.positions["exchange"]))]
    if results.heating is not None:
        names.append("heat_loads.csv")
        names += [f"loads_{s}.csv" for s in SOURCES + ("total",)]
        names += [f"flux_{s}.csv" for s in SOURCES + ("total",)]
        names += [f"incident_{s}.csv" for s in SOURCES]
        if _has_planet_view(results):
            names.append("planet_view_unblocked.csv")
    if results.hinges is not None:
        names.append("hinges.csv")
    return names


def export_csv(results: Results, folder, *, threshold: float = DEFAULT_THRESHOLD,
               self_terms: bool = False) -> list:
    """Write the tables of :func:`table_names` into ``folder`` (created if missing).

    Parameters
    ----------
    results : vfactor.h5read.Results
    folder : str or os.PathLike
    threshold : float — smallest view factor or Gebhart factor listed in couplings.csv [1]
    self_terms : bool — also list a node's exchange with itself in conductances.csv

    Returns
    -------
    list of pathlib.Path — the tables written

    Raises
    ------
    ArgumentError
        Negative threshold, or ``folder`` is a file.
    vfactor.atomic.OutputError
        A table would replace the results file read, or cannot be written; all tables are
        written atomically together (:class:`vfactor.atomic.Batch`).
    """
    if not threshold >= 0:
        raise ArgumentError(f"--threshold must be >= 0, got {threshold!r}")
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ArgumentError(f"{folder}: CSV export needs a folder, and this is a file")
    names = table_names(results)
    atomic.refuse_inputs([folder / x for x in names], inputs_of(results), hint=REFUSE_HINT)
    with atomic.Batch(inputs_of(results), hint=REFUSE_HINT) as batch:
        batch.folder(folder, "the CSV folder")
        return _long_tables(results, folder, threshold, self_terms, batch)


def _long_tables(results: Results, folder: Path, threshold: float, self_terms: bool,
                 batch) -> list:
    g = results.geometry
    nodes = g.nodes
    n = len(nodes)
    vf, ex, heat = results.view_factors, results.exchange, results.heating
    written = []

    header = ["node", "coating", "area [m2]", "solar_absorptivity [1]", "ir_emissivity [1]",
              "facets [1]"]
    cols = []
    if vf is not None:
        header += ["view_factor_space [1]", "view_factor_space_stderr [1]", "view_factor_inert [1]"]
        cols += [vf.space, vf.stderr_space, vf.inert]
    if ex is not None:
        header += ["gebhart_space [1]", "exchange_area_space [m2]", "conductance_space [W K-4]"]
        cols += [ex.gebhart_space, ex.area_space, STEFAN_BOLTZMANN * ex.area_space]
    if heat is not None and results.node_average is not None:
        for src in SOURCES + ("total",):
            header.append(f"average_absorbed_{src} [W]")
            cols.append(results.node_average[src])
    rows = []
    for i in range(n):
        rows.append([nodes.names[i], nodes.coating[i], nodes.area[i],
                     nodes.solar_absorptivity[i], nodes.ir_emissivity[i],
                     int(nodes.facet_count[i])] + [c[i] for c in cols])
    written.append(write_table(batch, folder / "nodes.csv", header, rows, "the node table"))

    if vf is not None:
        written.append(_coupling_table(batch, folder / "couplings.csv", nodes.names, vf, ex,
                                       threshold, "the coupling table"))
        if ex is not None:
            written.append(_conductance_table(batch, folder / "conductances.csv", nodes.names,
                                              vf, ex, self_terms))
    if results.positions is not None:
        for p, (vf_p, ex_p) in enumerate(zip(results.positions["view_factors"],
                                             results.positions["exchange"])):
            written.append(_coupling_table(batch, folder / f"couplings_position_{p}.csv",
                                           nodes.names, vf_p, ex_p, threshold,
                                           f"the coupling table of hinge position {p}"))
    return written + _step_tables(results, folder, batch)


def _coupling_table(batch, path, names, vf, ex, threshold, what) -> Path:
    """One row per ordered node pair whose view factor or Gebhart factor reaches
    ``threshold``."""
    header = ["from", "to", "view_factor [1]", "view_factor_stderr [1]"]
    if ex is not None:
        header += ["gebhart [1]", "exchange_area [m2]", "conductance [W K-4]"]
    # the stored entries of F and B (row-major): cost grows with the non-zeros
    F = as_csr(vf.matrix)
    pattern = (F + as_csr(ex.gebhart)) if ex is not None else F
    coo = as_csr(pattern).tocoo()
    order = np.lexsort((coo.col, coo.row))
    ii, jj = coo.row[order].astype(np.int64), coo.col[order].astype(np.int64)
    f_all = values_at(F, ii, jj)
    e_all = values_at(vf.stderr, ii, jj)
    b_all = values_at(ex.gebhart, ii, jj) if ex is not None else np.zeros(ii.size)
    a_all = values_at(ex.area, ii, jj) if ex is not None else np.zeros(ii.size)
    keep = (np.maximum(f_all, b_all) >= threshold) & ~((f_all == 0) & (b_all == 0))
    rows = []
    for k in np.flatnonzero(keep):
        i, j = int(ii[k]), int(jj[k])
        row = [names[i], names[j], f_all[k], e_all[k]]
        if ex is not None:
            row += [b_all[k], a_all[k], STEFAN_BOLTZMANN * a_all[k]]
        rows.append(row)
    return write_table(batch, path, header, rows, what)


def _conductance_table(batch, path, names, vf, ex, self_terms) -> Path:
    """conductances.csv: :func:`conductor_pairs`, then one row per node to space (the
    view factor from space to a node is not defined: left empty)."""
    header = ["node_a", "node_b", "exchange_area [m2]", "conductance [W K-4]",
              "view_factor_ab [1]", "view_factor_ab_stderr [1]", "view_factor_ba [1]",
              "view_factor_ba_stderr [1]"]
    p = conductor_pairs(vf, ex, self_terms=self_terms)
    rows = [[names[a], names[b], area, STEFAN_BOLTZMANN * area, fab, eab, fba, eba]
            for a, b, area, fab, eab, fba, eba in zip(*p)]
    rows += [[names[i], SPACE, ex.area_space[i], STEFAN_BOLTZMANN * ex.area_space[i],
              vf.space[i], vf.stderr_space[i], "", ""] for i in range(len(names))]
    return write_table(batch, path, header, rows, "the conductance table")


def _step_tables(results: Results, folder: Path, batch) -> list:
    """``heat_loads.csv``, the wide tables along the orbit, and ``hinges.csv``."""
    nodes = results.geometry.nodes
    n = len(nodes)
    heat = results.heating
    tr = results.trajectory
    written = []
    if heat is not None:
        header = ["step [1]", "time [s]", "sun_fraction [1]", "node", "solar [W]", "albedo [W]",
                  "planet_ir [W]", "total [W]"]
        rows = []
        for k in range(tr.n_steps):
            for i in range(n):
                s, a, p = heat.node_solar[k, i], heat.node_albedo[k, i], heat.node_planet_ir[k, i]
                rows.append([k, tr.time[k], tr.sun_fraction[k], nodes.names[i], s, a, p,
                             s + a + p])
        written.append(write_table(batch, folder / "heat_loads.csv", header, rows,
                                   "the heat-load table"))
        written += _wide_tables(results, folder, batch)

    if results.hinges is not None:
        names = results.hinges["name"]
        angle = results.hinges["angle_deg"]
        rows = [[k, tr.time[k]] + [angle[k, h] for h in range(len(names))]
                for k in range(tr.n_steps)]
        written.append(write_table(batch, folder / "hinges.csv",
                                   ["step [1]", "time [s]"] + [f"{n} [deg]" for n in names],
                                   rows, "the hinge-angle table"))
    return written


def _wide_tables(results: Results, folder: Path, batch) -> list:
    """One row per step (and the closing row), one column per node, for each quantity."""
    heat, tr, nodes = results.heating, results.trajectory, results.geometry.nodes
    absorbed = {s: getattr(heat, f"node_{s}") for s in SOURCES}
    absorbed["total"] = absorbed["solar"] + absorbed["albedo"] + absorbed["planet_ir"]
    tables = [(f"loads_{s}.csv", v, "W", f"the absorbed {s} power table")
              for s, v in absorbed.items()]
    tables += [(f"flux_{s}.csv", per_area(v, nodes.area), "W m-2",
                f"the absorbed {s} flux table") for s, v in absorbed.items()]
    tables += [(f"incident_{s}.csv", getattr(heat, f"incident_{s}"), "W",
                f"the incident {s} power table") for s in SOURCES]
    if _has_planet_view(results):
        tables.append(("planet_view_unblocked.csv",
                       planet_view_factor(heat.incident_planet_ir, heat.planet_ir, nodes.area),
                       "1", "the planet view-factor table"))
    period = results.orbit_attrs.get("period_s", tr.period)
    closing = closing_time(tr.time, period)
    header_of = {unit: ["time [s]", "sun_fraction [1]"]
                 + [f"{name} [{unit}]" for name in nodes.names] for unit in ("W", "W m-2", "1")}
    written = []
    for name, values, unit, what in tables:
        rows = [[tr.time[k], tr.sun_fraction[k], *values[k]] for k in range(tr.n_steps)]
        if closing is not None:
            rows.append([closing, tr.sun_fraction[0], *values[0]])
        written.append(write_table(batch, folder / name, header_of[unit], rows, what))
    return written
