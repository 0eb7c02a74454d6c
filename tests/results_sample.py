"""A small hand-made, self-consistent set of results for the output tests.

Two 1 m x 1 m plates facing each other 1 m apart (front sides = nodes ``top`` and ``bottom``,
back sides inert), in a made-up circular orbit of 8 steps with two steps in eclipse. Every
number is built here from the geometry, so tests can check the outputs against it:

- view factor between the plates F = 0.19982 (opposed parallel unit squares at unit distance;
  Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, 6th ed., Table 13.2 / Fig. 13.4);
- Gebhart factors from the diffuse grey linear solve (I - F diag(1 - eps)) B = F diag(eps);
- per-facet absorbed flux chosen per step, node power = sum of facet flux * facet area.

These are not results of vfactor's physics: they are inputs for the writer/reader, summary,
plot and export code.
"""

from __future__ import annotations

import hashlib
from types import SimpleNamespace

import numpy as np

from vfactor.geometry import Coating, Geometry, NodeTable
from vfactor.heating import Heating
from vfactor.radiation import Exchange, ViewFactors
from vfactor.trajectory import Trajectory

F_PLATES = 0.19982  # Incropera & DeWitt 6th ed., Table 13.2: X/L = Y/L = 1


def sample_model():
    text = '[model]\nname = "two plates (invented test case)"\nlength_unit = "m"\n'
    return SimpleNamespace(path="two_plates.toml", source_text=text,
                           sha256=hashlib.sha256(text.encode()).hexdigest(),
                           name="two plates (invented test case)", length_unit="m")


def sample_geometry() -> Geometry:
    v = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0],
                  [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1]], dtype=float)
    # bottom plate at z=0 faces +z; top plate at z=1 faces -z
    tri = np.array([[0, 1, 2], [0, 2, 3], [4, 6, 5], [4, 7, 6]], dtype=np.int64)
    e1 = v[tri[:, 1]] - v[tri[:, 0]]
    e2 = v[tri[:, 2]] - v[tri[:, 0]]
    cr = np.cross(e1, e2)
    areas = 0.5 * np.linalg.norm(cr, axis=1)
    normals = cr / (2 * areas[:, None])
    centroids = v[tri].mean(axis=1)
    coatings = (Coating("white", 0.2, 0.85), Coating("black", 0.95, 0.9))
    nodes = NodeTable(names=("bottom", "top"), area=np.array([1.0, 1.0]),
                      solar_absorptivity=np.array([0.2, 0.95]),
                      ir_emissivity=np.array([0.85, 0.9]),
                      solar_specular=np.zeros(2), ir_specular=np.zeros(2),
                      coating=("white", "black"), facet_count=np.array([2, 2]))
    return Geometry(vertices=v, triangles=tri, normals=normals, areas=areas,
                    centroids=centroids,
                    front_node=np.array([0, 0, 1, 1], np.int32),
                    back_node=np.full(4, -1, np.int32),
                    front_coating=np.array([0, 0, 1, 1], np.int32),
                    back_coating=np.full(4, -1, np.int32),
                    part=np.array([0, 0, 1, 1], np.int32), part_names=("bottom", "top"),
                    coatings=coatings, nodes=nodes)


def sample_view_factors(rays=10_000, facet=False) -> ViewFactors:
    f = F_PLATES
    m = np.array([[0.0, f], [f, 0.0]])
    space = 1.0 - m.sum(axis=1)
    err = np.sqrt(m * (1 - m) / rays)
    facet_matrix = None
    if facet:
        import scipy.sparse as sp

        # layout of vfactor.radiation.compute_view_factors: rows = facet sides (k front,
        # 4 + k back), columns = nodes, space, inert; each front sees the other plate with
        # the plate value and space with the rest (a simplification for the file test)
        rows = np.array([0, 1, 2, 3, 0, 1, 2, 3])
        cols = np.array([1, 1, 0, 0, 2, 2, 2, 2])
        vals = np.array([f] * 4 + [1 - f] * 4)
        facet_matrix = sp.csr_matrix((vals, (rows, cols)), shape=(8, 4))
    return ViewFactors(matrix=m, space=space, inert=np.zeros(2), stderr=err,
                       stderr_space=np.sqrt(space * (1 - space) / rays),
                       raw_matrix=m + np.array([[0, 1e-3], [-1e-3, 0]]),
                       raw_space=space.copy(), raw_inert=np.zeros(2),
                       rays=np.full(2, rays, np.int64), adjustment_sigma=0.25,
                       method="test smoothing", converged=True, target_error=None,
                       facet_matrix=facet_matrix,
                       # two equal independent estimates combined: sigma / sqrt(2)
                       # (inverse-variance weighting, Cochran 1977, sec. 5A.6)
                       smoothed_stderr=err / np.sqrt(2.0),
                       smoothed_stderr_space=np.sqrt(space * (1 - space) / rays))


def sample_exchange(geometry: Geometry, vf: ViewFactors) -> Exchange:
    eps = geometry.nodes.ir_emissivity
    n = len(eps)
    b = np.linalg.solve(np.eye(n) - vf.matrix * (1 - eps)[None, :], vf.matrix * eps[None, :])
    # space is a black sink: B_i,space = F_i,space + sum_k F_ik (1 - eps_k) B_k,space
    bs = np.linalg.solve(np.eye(n) - vf.matrix * (1 - eps)[None, :], vf.space)
    area = (eps * geometry.nodes.area)[:, None] * b
    return Exchange(gebhart=b, gebhart_space=bs, area=area,
                    area_space=eps * geometry.nodes.area * bs, stderr=np.full((n, n), 1e-3),
                    method="matrix", band="ir")


def sample_trajectory(steps=8) -> Trajectory:
    period = 5676.0
    t = np.arange(steps) * period / steps
    ang = 2 * np.pi * t / period
    r = 6_878_137.0
    pos = np.stack([r * np.cos(ang), r * np.sin(ang), np.zeros(steps)], axis=1)
    vel = np.stack([-np.sin(ang), np.cos(ang), np.zeros(steps)], axis=1) * 7612.0
    sun_in = np.tile([1.0, 0.0, 0.0], (steps, 1))
    sun_fraction = np.ones(steps)
    sun_fraction[steps // 2] = 0.0
    sun_fraction[steps // 2 + 1] = 0.0
    rot = np.tile(np.eye(3), (steps, 1, 1))
    nadir = -pos / r
    return Trajectory(epoch_utc="2027-03-21T00:00:00Z", time=t, position=pos, velocity=vel,
                      sun_inertial=sun_in, sun_distance=np.full(steps, 1.496e11),
                      sun_fraction=sun_fraction, beta=np.full(steps, np.radians(12.5)),
                      body_to_inertial=rot, sun_body=sun_in.copy(), nadir_body=nadir,
                      planet_distance=np.full(steps, r), period=period, planet="Earth")


def sample_heating(geometry: Geometry, trajectory: Trajectory) -> Heating:
    steps = trajectory.n_steps
    f = geometry.n_facets
    rng = np.random.default_rng(7)
    lit = trajectory.sun_fraction[:, None]
    facet_solar = rng.uniform(0, 300, (steps, f)) * lit
    facet_albedo = rng.uniform(0, 80, (steps, f)) * lit
    facet_ir = rng.uniform(40, 60, (steps, f))
    n = geometry.n_nodes

    def to_nodes(flux):
        out = np.zeros((steps, n))
        for k in range(f):
            out[:, geometry.front_node[k]] += flux[:, k] * geometry.areas[k]
        return out

    alpha = geometry.nodes.solar_absorptivity
    eps = geometry.nodes.ir_emissivity
    ns, na, ni = to_nodes(facet_solar), to_nodes(facet_albedo), to_nodes(facet_ir)
    return Heating(node_solar=ns, node_albedo=na, node_planet_ir=ni,
                   facet_solar=facet_solar, facet_albedo=facet_albedo, facet_planet_ir=facet_ir,
                   incident_solar=ns / alpha, incident_albedo=na / alpha,
                   incident_planet_ir=ni / eps, solar_constant=np.full(steps, 1361.0),
                   albedo=0.3, planet_ir=230.0, case="nominal")


def sample_results(with_orbit=True, facet=False):
    """The keyword arguments of :func:`vfactor.h5io.write_results` for the sample."""
    model = sample_model()
    geometry = sample_geometry()
    vf = sample_view_factors(facet=facet)
    ex = sample_exchange(geometry, vf)
    kw = dict(model=model, geometry=geometry, view_factors=vf, exchange=ex,
              provenance={"seed": 3, "rays_per_node": 10_000,
                          "elapsed_s": {"view_factors": 1.5, "total": 2.0}})
    if with_orbit:
        tr = sample_trajectory()
        kw.update(trajectory=tr, heating=sample_heating(geometry, tr))
    return kw
