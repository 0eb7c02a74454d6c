"""Summary of a results file: numbers match the file, JSON is complete, cautions shown."""

from __future__ import annotations

import json

import numpy as np
import pytest

from vfactor import h5io, summary
from vfactor.constants import STEFAN_BOLTZMANN
from vfactor.trajectory import orbit_facts

from results_sample import sample_results


@pytest.fixture
def results(tmp_path):
    kw = sample_results()
    return h5io.read_results(h5io.write_results(tmp_path / "out.h5", **kw)), kw


def test_summary_numbers_match_the_file(results):
    r, kw = results
    s = summary.summarize(r)
    assert s["provenance"]["seed"] == 3 and s["provenance"]["rays_per_node"] == 10_000
    assert s["provenance"]["model_sha256"] == kw["model"].sha256
    pair = s["couplings"]["strongest"][0]
    assert (pair["from"], pair["to"]) == ("bottom", "top")
    assert pair["exchange_area_m2"] == kw["exchange"].area[0, 1]
    assert pair["conductance_W_K4"] == STEFAN_BOLTZMANN * kw["exchange"].area[0, 1]
    # Exchange.stderr is given: area error = eps_i A_i sigma(B_ij)
    assert pair["exchange_area_stderr_m2"] == pytest.approx(0.85 * 1.0 * 1e-3, rel=1e-12)
    # the error shown beside the delivered (smoothed) value is the delivered one
    vf = kw["view_factors"]
    assert pair["view_factor_stderr"] == vf.smoothed_stderr[0, 1]
    assert s["space"][1]["view_factor_stderr"] == vf.smoothed_stderr_space[1]
    assert s["space"][1]["view_factor"] == kw["view_factors"].space[1]
    # the view factor of a node to itself (a concave node sees itself) is listed too
    assert s["space"][1]["self_view_factor"] == kw["view_factors"].matrix[1, 1]
    heat = kw["heating"]
    row = s["heat_loads"]["nodes"][0]
    assert row["solar"]["max_W"] == heat.node_solar[:, 0].max()
    assert row["solar"]["min_W"] == 0.0  # two steps in umbra
    # evenly spaced steps over one orbit: the average is the plain mean of the steps
    assert row["total"]["average_W"] == pytest.approx(
        (heat.node_solar + heat.node_albedo + heat.node_planet_ir)[:, 0].mean(), rel=1e-13)
    o = s["orbit"]
    facts = orbit_facts(r.trajectory)  # the orbit module's facts are passed through
    assert o["eclipse_share"] == facts.eclipse_share
    assert o["longest_eclipse_s"] == facts.longest_eclipse_s
    assert o["beta_min_deg"] == pytest.approx(12.5, abs=1e-12)  # stored beta, read back
    assert o["period_s"] == 5676.0 and o["steps"] == 8


def test_text_and_json(results):
    r, _ = results
    text = summary.format_summary(r)
    for needle in ("Strongest couplings", "Couplings to deep space", "Orbit", "heat loads",
                   "Cautions", "licensed engineering practice", "bottom -> top",
                   "error of raw view factors", "error of delivered (smoothed) view factors"):
        assert needle in text, needle
    back = json.loads(summary.to_json(summary.summarize(r)))
    assert back["cautions"] == list(summary.CAUTIONS)
    assert back["heat_loads"]["case"] == "nominal"


def test_couplings_only(tmp_path):
    r = h5io.read_results(h5io.write_results(tmp_path / "c.h5", **sample_results(with_orbit=False)))
    s = summary.summarize(r)
    assert s["orbit"] is None and s["heat_loads"] is None
    assert "Orbit" not in summary.format_summary(r)
    assert np.isfinite(s["accuracy"]["largest_relative_stderr_significant"])


def test_heat_load_error_is_reported(tmp_path):
    import dataclasses

    kw = sample_results()
    err = np.zeros_like(kw["heating"].node_solar)
    err[3, 1] = 0.75  # W, made up for the test
    kw["heating"] = dataclasses.replace(kw["heating"], node_solar_stderr=err,
                                        node_albedo_stderr=err / 2,
                                        node_planet_ir_stderr=err / 3)
    r = h5io.read_results(h5io.write_results(tmp_path / "e.h5", **kw))
    w = summary.summarize(r)["heat_loads"]["largest_stderr"]
    assert w == {"stderr_W": 0.75, "node": "top", "source": "solar", "step": 3}
    assert "0.7500 W (top, solar, step 3)" in summary.format_summary(r)


def test_summary_warns_of_inert_losses_and_large_errors(tmp_path):
    # guards of our own (summary.INERT_WARNING_SHARE 1 %, RELATIVE_ERROR_WARNING 5 %):
    # the sample loses nothing to inert sides; moving 2 % of node 0's row there warns
    kw = sample_results()
    r = h5io.read_results(h5io.write_results(tmp_path / "a.h5", **kw))
    base = summary.summarize(r)
    assert not any("inert" in w for w in base["warnings"]), base["warnings"]
    vf = kw["view_factors"]
    inert = np.array(vf.inert, float)
    inert[0] = 0.02
    stderr = np.array(vf.stderr, float)
    stderr[vf.raw_matrix >= summary.SIGNIFICANT_VIEW_FACTOR] *= 1e3
    kw["view_factors"] = type(vf)(**{**vf.__dict__, "inert": inert, "stderr": stderr})
    r = h5io.read_results(h5io.write_results(tmp_path / "b.h5", **kw))
    s = summary.summarize(r)
    assert any("2.0 % of its emission to inert sides" in w for w in s["warnings"]), s
    assert any("run with more rays" in w for w in s["warnings"]), s["warnings"]
    text = summary.format_summary(r)
    assert "\nWarnings\n" in text and text.index("Warnings") < text.index("Cautions")


def test_strongest_pairs_are_the_top_of_the_full_ranking(demo_model_path, tmp_path):
    # the top-N selection (numpy partition) must equal the head of a plain full sort of
    # every pair by exchange area (the definition of "strongest"), ties by pair order
    from vfactor.pipeline import run

    out = tmp_path / "demo.h5"
    run(demo_model_path, out, rays=2000)
    r = h5io.read_results(out)
    full = summary.summarize(r, top=10**6)["couplings"]
    names = r.geometry.nodes.names
    area = r.exchange.area
    n = len(names)
    ranked = sorted(((i, j) for i in range(n) for j in range(i + 1, n)
                     if area[i, j] > 0 or r.view_factors.matrix[i, j] > 0),
                    key=lambda p: -area[p])
    assert full["pairs_total"] == len(ranked)
    assert [(p["from"], p["to"]) for p in full["strongest"]] == \
        [(names[i], names[j]) for i, j in ranked]
    for top in (1, 4, 15):
        head = summary.summarize(r, top=top)["couplings"]
        assert head["strongest"] == full["strongest"][:top] and head["shown"] == top


def test_many_nodes_are_summed_by_part(results, monkeypatch):
    # above NODE_LIST_LIMIT nodes the text gives per-part sums (here forced at 2 nodes):
    # a part's loads are the sums of its nodes' loads at every step (min/max of that sum),
    # and the most loaded nodes are listed by orbit-average total
    r, kw = results
    heat = kw["heating"]
    s = summary.summarize(r, top=1)
    by_part = {row["part"]: row for row in s["parts"]}
    assert by_part["top"]["nodes"] == 1 and by_part["top"]["area_m2"] == 1.0
    total = (heat.node_solar + heat.node_albedo + heat.node_planet_ir)[:, 1]
    assert by_part["top"]["heat_loads"]["total"]["max_W"] == total.max()
    assert by_part["top"]["space_view_factor"]["area_weighted"] == pytest.approx(
        kw["view_factors"].space[1], rel=1e-15)
    averages = [row["total"]["average_W"] for row in s["heat_loads"]["nodes"]]
    largest = s["heat_loads"]["largest"]
    assert len(largest) == 1 and largest[0]["node"] == ("bottom", "top")[int(np.argmax(averages))]
    monkeypatch.setattr(summary, "NODE_LIST_LIMIT", 1)
    text = summary.format_summary(r, top=1)
    assert "Nodes by part (2 nodes" in text and "Couplings to deep space by part" in text
    assert "nodes of largest orbit-average load" in text
    assert "Nodes by part" not in summary.format_summary(r, top=1, all_nodes=True)


def test_reflection_warning_names_the_nodes_that_take_reflected_power():
    # Absorbed = direct (alpha x incident) + what arrives after reflections; a node whose
    # reflected share passes REFLECTED_WARNING_SHARE is warned about when the couplings are
    # uncertain, and not when they are not (arithmetic of the definitions, no source needed).
    from types import SimpleNamespace

    from vfactor.summary import RELATIVE_ERROR_WARNING, _reflection_warnings

    nodes = SimpleNamespace(names=("a", "b"), solar_absorptivity=np.array([0.5, 0.5]),
                            ir_emissivity=np.array([1.0, 1.0]))
    incident = np.array([[10.0, 2.0], [10.0, 2.0]])
    heat = SimpleNamespace(node_solar=np.array([[5.2, 1.5], [5.2, 1.5]]),   # b: 1/3 reflected
                           incident_solar=incident, node_albedo=np.zeros((2, 2)),
                           incident_albedo=np.zeros((2, 2)), node_planet_ir=incident.copy(),
                           incident_planet_ir=incident)
    lines = _reflection_warnings(heat, nodes, 2 * RELATIVE_ERROR_WARNING)
    assert len(lines) == 1 and "1 node(s)" in lines[0] and "'b': 33 %" in lines[0]
    assert "absorbed solar" in lines[0] and "--seed" in lines[0]
    assert _reflection_warnings(heat, nodes, 0.5 * RELATIVE_ERROR_WARNING) == []


def test_planet_rays_given_and_suggested_in_the_summary(tmp_path):
    # A node whose albedo error stands out gets a suggested planet_ray_factor
    # (vfactor.planetrays.suggested_factors); the rays per side of a node given more are
    # stored in /heating/planet_rays, read back and named by the summary.
    import dataclasses

    kw = sample_results()
    heat = kw["heating"]
    n = heat.node_solar.shape[1]
    err = np.full_like(heat.node_solar, 1e-4)
    err[2, 1] = 0.2                                     # W, made up for the test
    rays = np.full(n, 256)
    rays[0] = 1024
    kw["heating"] = dataclasses.replace(heat, node_solar_stderr=err, node_albedo_stderr=err,
                                        node_planet_ir_stderr=err / 2, rays_per_facet=256,
                                        node_planet_rays=rays)
    r = h5io.read_results(h5io.write_results(tmp_path / "p.h5", **kw))
    assert r.heating.node_planet_rays.tolist() == rays.tolist()
    planet = summary.summarize(r)["heat_loads"]["planet_rays"]
    name = r.geometry.nodes.names[1]
    assert planet["more"] == [{"node": r.geometry.nodes.names[0], "rays_per_side": 1024}]
    assert planet["suggested_factor"][name] > 1
    # never fewer rays than the run had on a node
    assert planet["suggested_factor"][r.geometry.nodes.names[0]] >= 4
    text = summary.format_summary(r)
    assert "[radiation] planet_ray_factor = { " in text
    assert f'"{name}" = {planet["suggested_factor"][name]}' in text
    assert "more planet rays: 1 node(s) had more than the 256 per facet side" in text
