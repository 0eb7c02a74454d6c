"""Exports: CSV columns and units match the HDF5 values; VTK and glTF load back."""

from __future__ import annotations

import csv

import h5py
import numpy as np
import pytest

from vfactor import export, h5io
from vfactor.h5read import read_coupling_matrix
from vfactor.errors import ArgumentError

from results_sample import sample_results


@pytest.fixture
def written(tmp_path):
    path = h5io.write_results(tmp_path / "out.h5", **sample_results())
    return path, h5io.read_results(path)


def _read(path):
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def _units(header):
    return {h.split(" [")[0]: (h.split(" [")[1].rstrip("]") if " [" in h else None)
            for h in header}


def test_csv_matches_hdf5(written, tmp_path):
    path, r = written
    files = export.export(r, "csv", tmp_path / "csv")
    assert sorted(p.name for p in files) == ["couplings.csv", "heat_loads.csv", "nodes.csv"]
    with h5py.File(path, "r") as h:
        header, rows = _read(tmp_path / "csv" / "nodes.csv")
        col = {name.split(" [")[0]: k for k, name in enumerate(header)}
        u = _units(header)
        assert u["area"] == h["nodes/area"].attrs["units"] == "m2"
        assert u["exchange_area_space"] == h["exchange/area_space"].attrs["units"]
        assert u["conductance_space"] == h["exchange/conductance_space"].attrs["units"]
        assert u["average_absorbed_total"] == h["heating/average/total"].attrs["units"]
        names = h["nodes/name"].asstr()[()]
        assert [row[0] for row in rows] == list(names)
        np.testing.assert_array_equal([float(row[col["area"]]) for row in rows], h["nodes/area"][()])
        np.testing.assert_array_equal([float(row[col["view_factor_space"]]) for row in rows],
                                      h["view_factors/space"][()])
        np.testing.assert_array_equal([float(row[col["average_absorbed_total"]]) for row in rows],
                                      h["heating/average/total"][()])

        header, rows = _read(tmp_path / "csv" / "couplings.csv")
        col = {name.split(" [")[0]: k for k, name in enumerate(header)}
        u = _units(header)
        assert u["exchange_area"] == h["exchange/area"].attrs["units"]
        assert u["conductance"] == h["exchange/conductance"].attrs["units"]
        index = {name: k for k, name in enumerate(names)}
        mat = {k: read_coupling_matrix(h[k]).toarray() for k in
               ("view_factors/matrix", "exchange/gebhart", "exchange/area",
                "exchange/conductance")}
        assert rows
        for row in rows:
            i, j = index[row[0]], index[row[1]]
            assert float(row[col["view_factor"]]) == mat["view_factors/matrix"][i, j]
            assert float(row[col["gebhart"]]) == mat["exchange/gebhart"][i, j]
            assert float(row[col["exchange_area"]]) == mat["exchange/area"][i, j]
            assert float(row[col["conductance"]]) == mat["exchange/conductance"][i, j]
        listed = {(index[r_[0]], index[r_[1]]) for r_ in rows}
        g = mat["exchange/gebhart"]
        f = mat["view_factors/matrix"]
        expected = {(i, j) for i in range(len(names)) for j in range(len(names))
                    if max(f[i, j], g[i, j]) >= export.DEFAULT_THRESHOLD}
        assert listed == expected

        header, rows = _read(tmp_path / "csv" / "heat_loads.csv")
        col = {name.split(" [")[0]: k for k, name in enumerate(header)}
        u = _units(header)
        assert u["solar"] == h["heating/solar"].attrs["units"] == "W"
        assert u["time"] == h["orbit/time"].attrs["units"] == "s"
        t, n = h["heating/solar"].shape
        assert len(rows) == t * n
        for row in rows:
            k, i = int(row[col["step"]]), index[row[col["node"]]]
            assert float(row[col["time"]]) == h["orbit/time"][k]
            assert float(row[col["solar"]]) == h["heating/solar"][k, i]
            assert float(row[col["planet_ir"]]) == h["heating/planet_ir"][k, i]


def test_vtk_loads_back_with_facet_values(written, tmp_path):
    import meshio

    _, r = written
    (out,) = export.export(r, "vtk", tmp_path / "mesh.vtu")
    m = meshio.read(out)
    np.testing.assert_array_equal(m.points, r.geometry.vertices)
    np.testing.assert_array_equal(m.cells_dict["triangle"], r.geometry.triangles)
    np.testing.assert_array_equal(m.cell_data["absorbed_total"][0], r.facet_average["total"])
    np.testing.assert_array_equal(m.cell_data["front_node"][0], r.geometry.front_node)


def test_gltf_loads_back_with_colours_and_values(written, tmp_path):
    import trimesh

    _, r = written
    (out,) = export.export(r, "gltf", tmp_path / "mesh.glb")
    scene = trimesh.load(out, process=False)
    (mesh,) = scene.geometry.values()
    g = r.geometry
    assert mesh.faces.shape == (g.n_facets, 3)
    np.testing.assert_allclose(mesh.vertices[mesh.faces], g.vertices[g.triangles], rtol=0,
                               atol=1e-6)  # float32 storage in glTF: micrometres
    value = np.asarray(mesh.vertex_attributes["_VALUE"]).reshape(-1)[mesh.faces[:, 0]]
    np.testing.assert_allclose(value, r.facet_average["total"], rtol=1e-6)  # float32 storage: rounding 6e-8 relative
    colours = mesh.visual.vertex_colors[mesh.faces[:, 0], :3].astype(int)
    # the hottest and coldest facets carry the two ends of the colour map
    hot, cold = np.argmax(value), np.argmin(value)
    assert colours[hot].sum() > colours[cold].sum()
    assert mesh.metadata["units"] == "W m-2"


def test_bad_format_and_threshold(written, tmp_path):
    _, r = written
    with pytest.raises(ArgumentError, match="unknown export format"):
        export.export(r, "xls", tmp_path / "x")
    with pytest.raises(ArgumentError, match="threshold"):
        export.export(r, "csv", tmp_path / "x", threshold=-1.0)


def test_mesh_file_with_a_foreign_suffix_is_refused_in_one_line(written, tmp_path):
    # `export --format vtk -o out.txt` used to end in an internal error from the writer's
    # format guess, and `--format gltf -o out.gltf` wrote binary glTF under the text-glTF
    # suffix; both are bad arguments (exit 2) and leave no file behind
    _, r = written
    with pytest.raises(ArgumentError, match=r"out\.txt.*\.vtu"):
        export.export(r, "vtk", tmp_path / "out.txt")
    with pytest.raises(ArgumentError, match=r"out\.gltf.*\.glb"):
        export.export(r, "gltf", tmp_path / "out.gltf")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.h5"]
    # the suffixes the README names still work, and a bare name gets its suffix
    assert export.export(r, "vtk", tmp_path / "a.vtu")[0].name == "a.vtu"
    assert export.export(r, "gltf", tmp_path / "b")[0].name == "b.glb"
