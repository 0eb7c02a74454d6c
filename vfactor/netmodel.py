"""The ``[network]`` section of a model file: what a quick-look temperature solve needs
besides the couplings and heat loads (:mod:`vfactor.solve`).

::

    [network]
    areal_capacity_J_K_m2 = 3000.0     # nodes not listed below: capacity = this x area
    tolerance_K = 0.01                 # cyclic steady state: change over one orbit below this
    max_orbits = 40

    [[network.nodes]]                  # one table per node, or per group of nodes
    node = "body.*"                    # a node name, or a pattern (* ? [..]) of node names
    capacity_J_K = 4000.0              # or mass_kg + specific_heat_J_kg_K,
                                       # or areal_capacity_J_K_m2; applies to each match
    power_W = 5.0                      # internal dissipation, constant, or a schedule:
    # schedule_s = [0.0, 1200.0]       #   from these times within the orbit [s]
    # schedule_W = [5.0, 20.0]         #   this power [W] (periodic over the orbit)
    # fixed_K = 293.15                 # a boundary node held at this temperature

    [[network.links]]                  # a conductive link
    a = "body.+x"
    b = "radiator"
    conductance_W_K = 0.8

    [[network.heaters]]                # a thermostat-controlled heater
    node = "camera"
    power_W = 6.0
    on_K = 268.15                      # switches on below this
    off_K = 273.15                     # and off above this

    [[network.blankets]]               # insulation: effective emittance between two nodes
    inner = "body.-y"                  # the surface under the blanket
    outer = "blanket.-y"               # the blanket's outer layer (a node of the model)
    effective_emittance = 0.02         # eps* of the blanket [1]
    # area_m2 = 0.48                   # default: the area of the inner node

Every node table, link, heater and blanket names nodes of the model's geometry; a
pattern that matches no node is an error (a typo would otherwise leave a node at its
default). A node no table gives a capacity gets ``areal_capacity_J_K_m2`` times its area
and is flagged as defaulted in the output. A blanket is the usual effective-emittance model
of multi-layer insulation: a radiative exchange area ``eps* A`` between the two nodes
(common practice). A heater holds its node between its set points; in the steady state it
gives the power that keeps the node at the middle of its band, up to ``power_W``.
"""

from __future__ import annotations

import fnmatch
from dataclasses import dataclass, field

import numpy as np

from vfactor.errors import ModelError
from vfactor.tomlread import TableReader, show

__all__ = ["NetworkSpec", "Heater", "network_from_table", "DEFAULT_AREAL_CAPACITY"]

DEFAULT_AREAL_CAPACITY = 3000.0
"""Heat capacity per area of a node not given one [J K-1 m-2]: about 1.1 mm of aluminium
(2700 kg m-3 x 900 J kg-1 K-1 x 1.2 mm = 2900; handbook properties of aluminium, from
memory) — a thin panel; give real values for anything that matters."""

_TOP = {"areal_capacity_J_K_m2", "tolerance_K", "max_orbits", "nodes", "links", "heaters",
        "blankets"}
_NODE = {"node", "capacity_J_K", "mass_kg", "specific_heat_J_kg_K", "areal_capacity_J_K_m2",
         "power_W", "schedule_s", "schedule_W", "fixed_K"}


@dataclass(frozen=True)
class Heater:
    node: int
    power: float      # [W]
    on: float         # [K]
    off: float        # [K]


@dataclass(frozen=True)
class NetworkSpec:
    """The ``[network]`` section resolved against a node list (SI units).

    Attributes
    ----------
    capacity : (n,) float [J/K]; defaulted : (n,) bool — from the areal default
    power : (n,) float — constant internal dissipation [W]
    schedules : tuple of (node, times (k,) [s], powers (k,) [W]) — piecewise constant
    fixed : (n,) float — NaN free, else held temperature [K]
    links : (m, 3) float — (a, b, conductance [W/K])
    blankets : (b, 3) float — (inner, outer, exchange area eps* A [m2])
    heaters : tuple of Heater
    tolerance : float [K]; max_orbits : int
    """

    capacity: np.ndarray
    defaulted: np.ndarray
    power: np.ndarray
    fixed: np.ndarray
    links: np.ndarray
    blankets: np.ndarray
    heaters: tuple = ()
    schedules: tuple = ()
    tolerance: float = 0.01
    max_orbits: int = 40
    areal_capacity: float = DEFAULT_AREAL_CAPACITY
    given: bool = field(default=True)

    def dissipation(self, t, period) -> np.ndarray:
        """Internal dissipation of every node at time ``t`` [s] (schedules periodic over
        ``period``) [W]."""
        out = self.power.copy()
        for node, times, powers in self.schedules:
            tau = t % period if period > 0 else t
            k = int(np.searchsorted(times, tau, side="right")) - 1
            out[node] += powers[k] if k >= 0 else powers[-1]
        return out


def _matches(pattern, names, where, file):
    if any(c in pattern for c in "*?["):
        hits = [i for i, n in enumerate(names) if fnmatch.fnmatchcase(n, pattern)]
    else:
        hits = [names.index(pattern)] if pattern in names else []
    if not hits:
        import difflib

        close = difflib.get_close_matches(pattern, names, n=1)
        tip = f" (did you mean {close[0]!r}?)" if close else ""
        raise ModelError(f"no node matches {pattern!r}{tip}", file=file, where=where)
    return hits


def _one(pattern, names, where, file):
    hits = _matches(pattern, names, where, file)
    if len(hits) != 1:
        raise ModelError(f"{pattern!r} matches {len(hits)} nodes; name one node", file=file,
                         where=where)
    return hits[0]


def _list(reader, key):
    value = reader.table.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise reader.error(key, f"must be an array of tables ([[network.{key}]]), got "
                                f"{show(value)}")
    return value


def network_from_table(table, names, areas, file=None) -> NetworkSpec:
    """The :class:`NetworkSpec` of the raw ``[network]`` table (None: every node at its
    default capacity, no dissipation, links, heaters or blankets) for the nodes ``names``
    with areas ``areas`` [m2]. Raises :class:`vfactor.errors.ModelError` (one line naming
    ``[network] ...``)."""
    names = list(names)
    areas = np.asarray(areas, dtype=float)
    n = len(names)
    top = TableReader(table if table is not None else {}, file, "[network]")
    top.check_keys(_TOP, "in [network]")
    areal = top.number("areal_capacity_J_K_m2", DEFAULT_AREAL_CAPACITY, exclusive_minimum=0,
                       maximum=1e8, unit="J K-1 m-2")
    tolerance = top.number("tolerance_K", 0.01, exclusive_minimum=0, maximum=100, unit="K")
    max_orbits = top.integer("max_orbits", 40, minimum=1, maximum=10000)
    capacity = np.full(n, np.nan)
    power = np.zeros(n)
    fixed = np.full(n, np.nan)
    schedules = []
    for k, entry in enumerate(_list(top, "nodes")):
        r = TableReader(entry, file, f"[[network.nodes]] #{k + 1}")
        r.check_keys(_NODE, "in [[network.nodes]]")
        pattern = r.string("node")
        r.section = f"[[network.nodes]] {pattern}"
        hits = _matches(pattern, names, r.section, file)
        ways = [key for key in ("capacity_J_K", "mass_kg", "areal_capacity_J_K_m2")
                if r.has(key)]
        if len(ways) > 1:
            raise r.error(ways[1], f"give one of capacity_J_K, mass_kg (with "
                                   f"specific_heat_J_kg_K) or areal_capacity_J_K_m2, not "
                                   f"{' and '.join(ways)}")
        if r.has("mass_kg") != r.has("specific_heat_J_kg_K"):
            raise r.error("mass_kg" if not r.has("mass_kg") else "specific_heat_J_kg_K",
                          "is required with " + ("specific_heat_J_kg_K" if r.has(
                              "specific_heat_J_kg_K") else "mass_kg"))
        for i in hits:
            if r.has("capacity_J_K"):
                capacity[i] = r.number("capacity_J_K", exclusive_minimum=0, maximum=1e12,
                                       unit="J/K")
            elif r.has("mass_kg"):
                capacity[i] = (r.number("mass_kg", exclusive_minimum=0, maximum=1e7, unit="kg")
                               * r.number("specific_heat_J_kg_K", exclusive_minimum=0,
                                          maximum=1e5, unit="J kg-1 K-1"))
            elif r.has("areal_capacity_J_K_m2"):
                capacity[i] = r.number("areal_capacity_J_K_m2", exclusive_minimum=0,
                                       maximum=1e8, unit="J K-1 m-2") * areas[i]
        if r.has("power_W"):
            power[hits] += r.number("power_W", minimum=0, maximum=1e7, unit="W")
        if r.has("schedule_s") != r.has("schedule_W"):
            raise r.error("schedule_W" if r.has("schedule_s") else "schedule_s",
                          "schedule_s and schedule_W come together")
        if r.has("schedule_s"):
            t = np.asarray(r.table["schedule_s"], dtype=float) if isinstance(
                r.table["schedule_s"], list) else None
            p = np.asarray(r.table["schedule_W"], dtype=float) if isinstance(
                r.table["schedule_W"], list) else None
            if t is None or p is None or t.size < 1 or t.shape != p.shape \
                    or not np.isfinite(t).all() or not np.isfinite(p).all():
                raise r.error("schedule_W", "schedule_s and schedule_W must be lists of as "
                                            "many finite numbers")
            if t[0] != 0 or np.any(np.diff(t) <= 0) or np.any(p < 0):
                raise r.error("schedule_s", "must start at 0 and increase, with powers >= 0 "
                                            f"(got {show(r.table['schedule_s'])})")
            schedules += [(i, t, p) for i in hits]
        if r.has("fixed_K"):
            fixed[hits] = r.number("fixed_K", exclusive_minimum=0, maximum=1e4, unit="K")
    defaulted = np.isnan(capacity)
    capacity = np.where(defaulted, areal * areas, capacity)

    links = []
    for k, entry in enumerate(_list(top, "links")):
        r = TableReader(entry, file, f"[[network.links]] #{k + 1}")
        r.check_keys({"a", "b", "conductance_W_K"}, "in [[network.links]]")
        a = _one(r.string("a"), names, r.where("a"), file)
        b = _one(r.string("b"), names, r.where("b"), file)
        if a == b:
            raise r.error("b", "a link joins two different nodes")
        links.append((a, b, r.number("conductance_W_K", exclusive_minimum=0, maximum=1e9,
                                     unit="W/K")))
    blankets = []
    for k, entry in enumerate(_list(top, "blankets")):
        r = TableReader(entry, file, f"[[network.blankets]] #{k + 1}")
        r.check_keys({"inner", "outer", "effective_emittance", "area_m2"},
                     "in [[network.blankets]]")
        a = _one(r.string("inner"), names, r.where("inner"), file)
        b = _one(r.string("outer"), names, r.where("outer"), file)
        if a == b:
            raise r.error("outer", "the outer layer is another node than the inner surface")
        eps = r.number("effective_emittance", exclusive_minimum=0, maximum=1)
        area = r.number("area_m2", float(areas[a]), exclusive_minimum=0, maximum=1e6,
                        unit="m2")
        blankets.append((a, b, eps * area))
    heaters = []
    for k, entry in enumerate(_list(top, "heaters")):
        r = TableReader(entry, file, f"[[network.heaters]] #{k + 1}")
        r.check_keys({"node", "power_W", "on_K", "off_K"}, "in [[network.heaters]]")
        i = _one(r.string("node"), names, r.where("node"), file)
        on = r.number("on_K", exclusive_minimum=0, maximum=1e4, unit="K")
        off = r.number("off_K", exclusive_minimum=0, maximum=1e4, unit="K")
        if not off > on:
            raise r.error("off_K", f"must be above on_K ({on:g} K), got {off:g} K")
        heaters.append(Heater(i, r.number("power_W", exclusive_minimum=0, maximum=1e6,
                                          unit="W"), on, off))
    return NetworkSpec(capacity=capacity, defaulted=defaulted, power=power, fixed=fixed,
                       links=np.array(links, dtype=float).reshape(-1, 3),
                       blankets=np.array(blankets, dtype=float).reshape(-1, 3),
                       heaters=tuple(heaters), schedules=tuple(schedules),
                       tolerance=tolerance, max_orbits=max_orbits, areal_capacity=areal,
                       given=table is not None)
