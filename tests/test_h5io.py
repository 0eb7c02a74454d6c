"""Results file: layout of ARCHITECTURE section 6, round trip, atomic write, bad files."""

from __future__ import annotations

import h5py
import numpy as np
import scipy.sparse as sp
import pytest

from vfactor import h5io
from vfactor.h5read import read_coupling_matrix
from vfactor.sparsetools import dense
from vfactor.atomic import OutputError
from vfactor.constants import STEFAN_BOLTZMANN
from vfactor.errors import ResultsFileError

from results_sample import sample_results

CONTRACT = {  # ARCHITECTURE section 6: dataset -> units ("deg" there = UDUNITS "degree")
    "nodes/name": "", "nodes/area": "m2", "nodes/solar_absorptivity": "1",
    "nodes/ir_emissivity": "1", "facets/vertices": "m", "facets/triangles": "1",
    "facets/front_node": "1", "facets/back_node": "1", "view_factors/matrix": "1",
    "view_factors/space": "1", "view_factors/inert": "1", "view_factors/stderr": "1",
    "exchange/gebhart": "1", "exchange/gebhart_space": "1", "exchange/area": "m2",
    "exchange/area_space": "m2", "orbit/time": "s", "orbit/position": "km",
    "orbit/sun_fraction": "1", "orbit/sun_body": "1", "orbit/nadir_body": "1",
    "orbit/beta": "degree", "heating/solar": "W", "heating/albedo": "W", "heating/planet_ir": "W",
    "heating/facet/solar": "W m-2", "heating/facet/albedo": "W m-2",
    "heating/facet/planet_ir": "W m-2", "model/source": "",
}


@pytest.fixture
def written(tmp_path):
    kw = sample_results(facet=True)
    path = h5io.write_results(tmp_path / "out.h5", **kw)
    return path, kw


def test_contract_layout_units_and_descriptions(written):
    path, kw = written
    with h5py.File(path, "r") as h:
        for name, units in CONTRACT.items():
            assert name in h, name
            assert h[name].attrs["units"] == units, name
        every = []
        h.visititems(lambda n, o: every.append((n, o)) if isinstance(o, h5py.Dataset) and
                     not n.rsplit("/", 1)[-1] in ("indices", "indptr", "data") else None)
        assert len(every) > len(CONTRACT)
        for name, ds in every:
            assert "units" in ds.attrs, name
            assert isinstance(ds.attrs["description"], str) and ds.attrs["description"], name
        for key in ("vfactor_version", "created_utc", "model_sha256", "seed", "rays_per_node",
                    "schema_version"):
            assert key in h.attrs, key
        assert h.attrs["model_sha256"] == kw["model"].sha256
        assert h.attrs["seed"] == 3 and h.attrs["rays_per_node"] == 10_000
        assert h.attrs["elapsed_view_factors_s"] == 1.5
        assert h["model/source"].asstr()[()] == kw["model"].source_text
        # strings are UTF-8 variable length
        assert h["nodes/name"].dtype.kind == "O"
        assert h5py.check_string_dtype(h["nodes/name"].dtype).encoding == "utf-8"
        # per-facet heating is chunked and compressed
        assert h["heating/facet/solar"].compression == "gzip"
        assert h["heating/facet/solar"].chunks is not None
        # conductance = sigma * exchange area (Stefan-Boltzmann constant, CODATA 2018)
        np.testing.assert_array_equal(read_coupling_matrix(h["exchange/conductance"]).toarray(),
                                      STEFAN_BOLTZMANN * dense(kw["exchange"].area))
        # couplings are CSR groups with their own units and description (schema 2)
        assert h["exchange/gebhart"].attrs["units"] == "1"
        assert h["exchange/area"].attrs["description"]
        assert tuple(h["exchange/area"].attrs["shape"]) == (2, 2)
        # orbit stored at the edge in km and degrees
        np.testing.assert_allclose(h["orbit/position"][()] * 1e3, kw["trajectory"].position,
                                   rtol=0, atol=1e-6)
        np.testing.assert_allclose(np.radians(h["orbit/beta"][()]), kw["trajectory"].beta,
                                   rtol=0, atol=1e-15)


def test_round_trip(written):
    path, kw = written
    r = h5io.read_results(path)
    g, g0 = r.geometry, kw["geometry"]
    assert g.nodes.names == g0.nodes.names and g.part_names == g0.part_names
    np.testing.assert_array_equal(g.vertices, g0.vertices)
    np.testing.assert_array_equal(g.triangles, g0.triangles)
    np.testing.assert_array_equal(g.back_node, g0.back_node)
    assert g.coatings == g0.coatings
    vf, vf0 = r.view_factors, kw["view_factors"]
    for name in ("matrix", "space", "inert", "stderr", "raw_matrix", "rays", "smoothed_stderr",
                 "smoothed_stderr_space"):
        np.testing.assert_array_equal(dense(getattr(vf, name)), dense(getattr(vf0, name)))
    assert vf.target_error is None and vf.method == vf0.method
    assert (vf.facet_matrix != vf0.facet_matrix).nnz == 0
    np.testing.assert_array_equal(dense(r.exchange.area), dense(kw["exchange"].area))
    assert isinstance(r.exchange.area, sp.csr_array)
    rd = h5io.read_results(path, dense_couplings=True)
    assert isinstance(rd.exchange.area, np.ndarray)
    np.testing.assert_array_equal(rd.view_factors.matrix, dense(vf0.matrix))
    tr, tr0 = r.trajectory, kw["trajectory"]
    np.testing.assert_array_equal(tr.time, tr0.time)
    np.testing.assert_allclose(tr.position, tr0.position, rtol=1e-15)
    assert tr.period == tr0.period and tr.epoch_utc == tr0.epoch_utc
    h, h0 = r.heating, kw["heating"]
    np.testing.assert_array_equal(h.facet_albedo, h0.facet_albedo)
    np.testing.assert_array_equal(h.node_planet_ir, h0.node_planet_ir)
    # even steps over one orbit: the time average is the plain mean of the steps
    np.testing.assert_allclose(r.node_average["solar"], h0.node_solar.mean(axis=0), rtol=1e-14)
    np.testing.assert_allclose(r.node_average["total"],
                               (h0.node_solar + h0.node_albedo + h0.node_planet_ir).mean(axis=0),
                               rtol=1e-14)
    assert r.seed == 3 and r.rays_per_node == 10_000
    assert r.elapsed_s["view_factors"] == 1.5
    assert r.model_source == kw["model"].source_text


def test_couplings_only_file(tmp_path):
    kw = sample_results(with_orbit=False)
    r = h5io.read_results(h5io.write_results(tmp_path / "c.h5", **kw))
    assert r.trajectory is None and r.heating is None and r.node_average is None
    assert r.exchange is not None


def test_failed_write_leaves_no_file_and_keeps_old(tmp_path, monkeypatch):
    kw = sample_results()
    target = tmp_path / "out.h5"
    h5io.write_results(target, **kw)
    before = target.read_bytes()

    def boom(*args, **kwargs):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(h5io, "_write_heating", boom)
    with pytest.raises(RuntimeError, match="simulated"):
        h5io.write_results(target, **kw)
    assert target.read_bytes() == before  # the old file survives
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.h5"]  # no temporary left
    fresh = tmp_path / "new.h5"
    with pytest.raises(RuntimeError):
        h5io.write_results(fresh, **kw)
    assert not fresh.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.h5"]


def test_missing_folder(tmp_path):
    with pytest.raises(OutputError, match="does not exist") as err:
        h5io.write_results(tmp_path / "nope" / "out.h5", **sample_results())
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("kind", ["missing", "text", "foreign", "incomplete"])
def test_bad_results_files(tmp_path, kind):
    path = tmp_path / "bad.h5"
    if kind == "text":
        path.write_text("not hdf5\n")
    elif kind == "foreign":
        with h5py.File(path, "w") as h:
            h["x"] = 1
    elif kind == "incomplete":
        with h5py.File(path, "w") as h:
            h.attrs["file_kind"] = h5io.FILE_KIND
            h.attrs["schema_version"] = h5io.SCHEMA_VERSION
    with pytest.raises(ResultsFileError) as err:
        h5io.read_results(path)
    msg = str(err.value)
    assert "\n" not in msg and str(path) in msg


def test_written_file_has_ordinary_permissions(tmp_path):
    import os
    import stat

    path = h5io.write_results(tmp_path / "p.h5", **sample_results(with_orbit=False))
    mask = os.umask(0o022)
    os.umask(mask)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~mask


# Unit symbols of the stock UDUNITS-2 database (lib/SI.xml: m, s, W, K, prefix k;
# lib/udunits2-accepted.xml: "degree" is an alias of arc_degree, "deg" is not defined there
# nor in lib/udunits2-common.xml). A units string is a space-separated product of
# [prefix]symbol[power]; "1" is a dimensionless number, "" text.
_UDUNITS_SYMBOLS = {"m", "s", "W", "K", "degree"}
_UDUNITS_PREFIXES = ("", "k")


def _is_udunits(units: str) -> bool:
    import re

    if units in ("", "1"):
        return True
    for token in units.split(" "):
        m = re.fullmatch(r"([A-Za-z]+?)(-?[0-9]+)?", token)
        if m is None or not any(m.group(1) == p + s for p in _UDUNITS_PREFIXES
                                for s in _UDUNITS_SYMBOLS):
            return False
    return True


def test_every_units_attribute_is_a_udunits_string(written):
    path, _ = written
    with h5py.File(path, "r") as h:
        bad = []
        h.visititems(lambda n, o: bad.append((n, o.attrs["units"]))
                     if isinstance(o, h5py.Dataset) and not _is_udunits(o.attrs["units"])
                     else None)
    assert bad == []
    assert _is_udunits("W m-2") and _is_udunits("km s-1") and not _is_udunits("deg")


# Damaged or odd results files: each is refused on read with one line naming the file and
# the dataset (read_results checks every dataset once, before anything uses it).
def _replace(h, name, data, **kw):
    del h[name]
    h.create_dataset(name, data=data, **kw)


DAMAGE = {
    "no orbit group": (lambda h: h.__delitem__("orbit"), r"/orbit: missing, but /heating"),
    "no root seed": (lambda h: h.attrs.__delitem__("seed"), r"root attribute seed: missing"),
    "seed as text": (lambda h: h.attrs.__setitem__("seed", "abc"),
                     r"root attribute seed: 'abc' is not a whole number"),
    "text in nodes/area": (lambda h: _replace(h, "nodes/area", np.array(["a", "b"], object),
                                              dtype=h5py.string_dtype()),
                           r"/nodes/area: holds text"),
    "reshaped matrix": (lambda h: h["view_factors/matrix"].attrs.__setitem__("shape", [1, 4]),
                        r"/view_factors/matrix: attribute shape \(1, 4\), expected \(2, 2\)"),
    "column index out of range": (lambda h: h["view_factors/matrix/indices"].__setitem__(0, 7),
                                  r"/view_factors/matrix: row offsets or column indices out"),
    "triangle index out of range": (lambda h: h["facets/triangles"].__setitem__((0, 0), 99),
                                    r"/facets/triangles: index 99 out of range 0\.\.7"),
    "node index out of range": (lambda h: h["facets/back_node"].__setitem__(1, 2),
                                r"/facets/back_node: index 2 out of range -1\.\.1"),
    "nodes/name shorter": (lambda h: _replace(h, "nodes/name", np.array(["bottom"], object),
                                              dtype=h5py.string_dtype()),
                           r"has shape \(2,\), expected \(1,\) \(from the 1 node names"),
    "nodes/name longer": (lambda h: _replace(h, "nodes/name", np.array(["a", "b", "c"], object),
                                             dtype=h5py.string_dtype()),
                          r"has shape \(2,\), expected \(3,\) \(from the 3 node names"),
    "heating steps != orbit steps": (lambda h: _replace(h, "heating/solar",
                                                        h["heating/solar"][:5]),
                                     r"/heating/solar: has shape \(5, 2\), expected \(8, 2\)"),
    "facet table missing": (lambda h: h.__delitem__("heating/facet"), r"/heating/facet: missing"),
    "orbit period as text": (lambda h: h["orbit"].attrs.__setitem__("period_s", "x"),
                             r"/orbit attribute period_s: 'x' is not a number"),
    "an empty group instead of a matrix": (lambda h: (h.__delitem__("exchange/area"),
                                                      h.create_group("exchange/area")),
                                           r"/exchange/area: attribute shape \(\), expected"),
    "a group instead of a dataset": (lambda h: (h.__delitem__("exchange/area_space"),
                                                h.create_group("exchange/area_space")),
                                     r"/exchange/area_space: missing"),
}


@pytest.mark.parametrize("kind", sorted(DAMAGE))
def test_damaged_results_files_are_one_line(tmp_path, kind):
    damage, message = DAMAGE[kind]
    path = h5io.write_results(tmp_path / "d.h5", **sample_results())
    with h5py.File(path, "r+") as h:
        damage(h)
    with pytest.raises(ResultsFileError, match=message) as err:
        h5io.read_results(path)
    assert "\n" not in str(err.value) and str(err.value).startswith(f"{path}: ")


def test_facet_factor_table_is_checked(tmp_path):
    path = h5io.write_results(tmp_path / "f.h5", **sample_results(facet=True))
    h5io.read_results(path)  # intact: reads
    with h5py.File(path, "r+") as h:
        h["view_factors/facet/indices"][0] = 40  # 4 columns: nodes 0, 1, space, inert
    with pytest.raises(ResultsFileError, match="column indices out of range"):
        h5io.read_results(path)
