"""More planet rays on chosen nodes (vfactor.planetrays): independent blocks of rays.

A node given ``K`` blocks must keep an unbiased estimate, report an honest error, and its
scatter over seeds must fall as ``1 / sqrt(K)`` (the mean of ``K`` independent estimates;
common practice); the nodes not given more must not change at all.
"""

from __future__ import annotations

import numpy as np
import pytest

from heating_helpers import EARTH_R, make_geometry, make_trajectory, rectangle
from vfactor.environment import Environment
from vfactor.geometry import Coating
from vfactor.heating import compute_heating
from vfactor.planetrays import MAX_FACTOR, node_blocks
from vfactor.tracing.scene import Scene

K_SIGMA = 4.0


def _plate_and_panel():
    """A 4 m nadir plate (nodes "top", "bottom") with a black 0.4 m panel 0.3 m below it,
    500 km up, planet IR 237 W/m2 and albedo 0.3 with the Sun overhead."""
    coats = {"c": Coating("c", 0.5, 0.8), "k": Coating("k", 0.9, 0.9)}
    plate = dict(mesh=rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 4.0, 4.0),
                 front=("c", "top"), back=("c", "bottom"))
    panel = dict(mesh=rectangle((0.2, 0, -0.3), (1, 0, 0), (0, 1, 0), 0.4, 0.4),
                 front=("k", "panel"), back=None)
    geometry = make_geometry([plate, panel], coats)
    trajectory = make_trajectory([[0, 0, 1]], [0, 0, -1], EARTH_R + 500e3)
    return geometry, trajectory, Environment("custom", 1361.0, 0.3, 237.0)


def _run(geometry, trajectory, environment, **kw):
    scene = Scene.build(geometry.vertices, geometry.triangles)
    return compute_heating(geometry, scene, trajectory, environment, **kw)


def test_blocks_on_a_node_are_unbiased_honest_and_cut_its_scatter_by_root_k():
    # The plate's bottom sees the planet past the panel. With 4 blocks its planet IR and
    # albedo over 32 seeds must agree with a reference of 64 times the rays (within
    # K_SIGMA of the scatter of the mean), the reported errors must cover the scatter
    # (mean z^2 below 3.2; 1.4 expected for errors from 8 replicates), and the scatter
    # must be about half that of one block (2 expected; 1.3 to 3 allowed for 32 seeds).
    geometry, trajectory, environment = _plate_and_panel()
    i = geometry.nodes.index("bottom")
    blocks = np.ones(geometry.n_nodes, dtype=np.int64)
    blocks[i] = 4
    ref = _run(geometry, trajectory, environment, rays_per_facet=4096, seed=999,
               reflections=False)
    for src in ("planet_ir", "albedo"):
        truth = getattr(ref, f"node_{src}")[0, i]
        values = {1: [], 4: []}
        z2 = []
        for seed in range(1, 33):
            for k, given in ((1, None), (4, blocks)):
                h = _run(geometry, trajectory, environment, rays_per_facet=64, seed=seed,
                         reflections=False, planet_blocks=given)
                value = getattr(h, f"node_{src}")[0, i]
                values[k].append(value)
                if k == 4:
                    z2.append(((value - truth) / getattr(h, f"node_{src}_stderr")[0, i]) ** 2)
        more = np.asarray(values[4])
        assert abs(more.mean() - truth) < K_SIGMA * more.std(ddof=1) / np.sqrt(more.size), src
        assert np.mean(z2) < 3.2, src
        ratio = np.std(values[1], ddof=1) / more.std(ddof=1)
        assert 1.3 < ratio < 3.0, (src, ratio)


def test_the_nodes_not_given_more_rays_do_not_change():
    # Without reflections a node's loads come from its own rays only: giving the bottom
    # 8 blocks must leave the top and the panel bit for bit as they were, and one block
    # everywhere is the run without blocks.
    geometry, trajectory, environment = _plate_and_panel()
    kw = dict(rays_per_facet=64, seed=3, reflections=False)
    plain = _run(geometry, trajectory, environment, **kw)
    ones = _run(geometry, trajectory, environment,
                planet_blocks=np.ones(geometry.n_nodes, dtype=np.int64), **kw)
    blocks = np.ones(geometry.n_nodes, dtype=np.int64)
    blocks[geometry.nodes.index("bottom")] = 8
    more = _run(geometry, trajectory, environment, planet_blocks=blocks, **kw)
    others = [geometry.nodes.index("top"), geometry.nodes.index("panel")]
    for src in ("solar", "albedo", "planet_ir"):
        for name in (f"node_{src}", f"node_{src}_stderr", f"incident_{src}"):
            assert np.array_equal(getattr(ones, name), getattr(plain, name)), name
            assert np.array_equal(getattr(more, name)[:, others],
                                  getattr(plain, name)[:, others]), name
    assert plain.node_planet_rays is None
    assert more.node_planet_rays.tolist() == (64 * blocks).tolist()
    # the energy of the blocks is the side's: facet fluxes sum to the node loads
    area = geometry.areas
    for src in ("albedo", "planet_ir"):
        facet_total = (getattr(more, f"facet_{src}")[0] * area).sum()
        assert facet_total == pytest.approx(getattr(more, f"node_{src}")[0].sum(), rel=1e-12)


def test_node_blocks_from_the_model_setting():
    names = ["a", "b.x", "c"]
    assert node_blocks({}, names) is None
    assert node_blocks({"b.x": 1}, names) is None
    assert node_blocks({"b.x": 4, "c": MAX_FACTOR}, names).tolist() == [1, 4, MAX_FACTOR]
    with pytest.raises(ValueError, match=r"no node 'b\.y' \(did you mean 'b\.x'\?\)"):
        node_blocks({"b.y": 2}, names)
    geometry, trajectory, environment = _plate_and_panel()
    with pytest.raises(ValueError, match="planet_blocks"):
        _run(geometry, trajectory, environment, rays_per_facet=16,
             planet_blocks=np.full(geometry.n_nodes, MAX_FACTOR + 1))


def test_suggested_factors_bring_the_largest_error_down_as_far_as_the_budget_goes():
    # Water-filling against an exhaustive search (the reference: every allocation of the
    # factors 1..MAX_FACTOR to 3 nodes): for each budget the largest error^2 / factor must
    # be the smallest any allocation within the budget reaches, and the budget must hold.
    import itertools

    from vfactor.planetrays import suggested_factors

    every = np.array(list(itertools.product(range(1, MAX_FACTOR + 1), repeat=3)))

    error = np.array([0.03, 0.012, 0.02])
    sides = np.array([10, 40, 25])
    for share in (0.0, 0.2, 0.5, 1.0, 2.0):
        got = suggested_factors(error, sides, share=share)
        budget = share * sides.sum()
        assert ((got - 1) * sides).sum() <= budget
        within = every[((every - 1) * sides).sum(axis=1) <= budget]
        best = (error ** 2 / within).max(axis=1).min()
        assert max(error ** 2 / got) == pytest.approx(best, rel=1e-12), share
    # factors a run already had are kept, and the share is of the rays it had: 40 more
    # sides' worth of blocks here
    got = suggested_factors(error, sides, share=0.2, current=np.array([3, 1, 1]))
    assert got[0] >= 3 and ((got - 1) * sides).sum() <= 1.2 * (3 * 10 + 40 + 25) - 75
    # a node that sees another with a view factor of at least CAVITY_VIEW passes its error
    # on to it: the radiator back of a 1 cm slot gets the rays of the face behind it
    view = np.array([[0.0, 0.9, 0.0], [0.9, 0.0, 0.0], [0.0, 0.0, 0.0]])
    got = suggested_factors(np.array([0.03, 0.001, 0.01]), np.array([10, 10, 10]), view,
                            share=1.0)
    assert got[1] == got[0] > 1 and got[2] == 1


def test_the_resource_estimate_counts_the_extra_planet_rays():
    # A box of 6 per-face nodes: 4 times the planet rays on one face is 1 + 3/6 times the
    # heating ray cache of the whole (the estimate's own formula, resources.py).
    from vfactor import resources
    from vfactor.geometry import build_geometry
    from vfactor.model import load_model_text

    text = """
[model]
name = "box"
[coatings.w]
solar_absorptivity = 0.2
ir_emissivity = 0.8
[[parts]]
name = "body"
shape = "box"
size = [1.0, 1.0, 1.0]
front = { coating = "w", nodes = "per-face" }
[orbit]
altitude_km = 550.0
inclination_deg = 97.6
epoch = "2027-03-21T00:00:00Z"
[radiation]
rays_per_node = 20000
"""
    plain = load_model_text(text)
    more = load_model_text(text + 'planet_ray_factor = { "body.+x" = 4 }\n')
    assert dict(more.radiation.planet_ray_factor) == {"body.+x": 4}
    geometry = build_geometry(plain)
    cache = [resources.estimate_resources(m, geometry, cores=2).parts["heating ray cache"]
             for m in (plain, more)]
    assert cache[1] == pytest.approx(cache[0] * 1.5, rel=1e-12)
