"""Exports: CSV columns and units match the HDF5 values; VTK (single file, node names, time
series) and glTF load back. The solver tables of vfactor.tables: tests/test_tables.py."""

from __future__ import annotations

import csv

import h5py
import numpy as np
import pytest

from vfactor import export, h5io
from vfactor.heating import SOURCES
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
    wide = [f"{kind}_{src}.csv" for kind in ("loads", "flux") for src in SOURCES + ("total",)]
    wide += [f"incident_{src}.csv" for src in SOURCES] + ["planet_view_unblocked.csv"]
    assert sorted(p.name for p in files) == sorted(
        ["conductances.csv", "couplings.csv", "heat_loads.csv", "nodes.csv"] + wide)
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
    out = export.export(r, "vtk", tmp_path / "mesh.vtu")[0]
    m = meshio.read(out)
    np.testing.assert_array_equal(m.points, r.geometry.vertices)
    np.testing.assert_array_equal(m.cells_dict["triangle"], r.geometry.triangles)
    np.testing.assert_array_equal(m.cell_data["absorbed_total"][0], r.facet_average["total"])
    np.testing.assert_array_equal(m.cell_data["front_node"][0], r.geometry.front_node)


def test_vtk_node_index_and_names_match_the_node_table(written, tmp_path):
    # every facet carries the index of its node; <stem>_nodes.csv names each index, in
    # the order of /nodes/name; the .vtu is well-formed VTK XML (a VTKFile of type
    # UnstructuredGrid with named DataArray elements: Kitware, "VTK File Formats", XML
    # section) for the standard library parser as well as for meshio
    import xml.etree.ElementTree as ET

    import meshio

    path, r = written
    files = export.export(r, "vtk", tmp_path / "mesh")
    assert [f.name for f in files[:3]] == ["mesh.vtu", "mesh_nodes.csv", "mesh.pvd"]
    header, rows = _read(tmp_path / "mesh_nodes.csv")
    assert header == ["node_index [1]", "node"]
    with h5py.File(path, "r") as h:
        names = list(h["nodes/name"].asstr()[()])
    assert [int(row[0]) for row in rows] == list(range(len(names)))
    assert [row[1] for row in rows] == names == list(r.geometry.nodes.names)

    node = meshio.read(tmp_path / "mesh.vtu").cell_data["node"][0]
    g = r.geometry
    # the sample's back sides are inert: a facet's node is its front node
    np.testing.assert_array_equal(node, g.front_node)
    assert [rows[k][1] for k in node] == [g.nodes.names[k] for k in g.front_node]
    root = ET.parse(tmp_path / "mesh.vtu").getroot()
    assert root.get("type") == "UnstructuredGrid"
    cell_arrays = {a.get("Name") for a in root.iter("DataArray")}
    assert {"node", "front_node", "back_node", "absorbed_total"} <= cell_arrays


def test_vtk_facet_node_falls_back_to_the_back_side():
    # a facet whose front is inert belongs to its back node; -1 only when both are inert
    from types import SimpleNamespace

    g = SimpleNamespace(front_node=np.array([0, -1, 2, -1]), back_node=np.array([-1, 1, 3, -1]))
    np.testing.assert_array_equal(export.facet_node(g), [0, 1, 2, -1])


def test_vtk_time_series_lists_every_step_with_its_time(written, tmp_path):
    # the ParaView data-collection (.pvd) file names one .vtu per step with the step time;
    # each step file holds that step's absorbed flux per facet, bit for bit
    import xml.etree.ElementTree as ET

    import meshio

    path, r = written
    files = export.export(r, "vtk", tmp_path / "mesh.vtu")
    root = ET.parse(tmp_path / "mesh.pvd").getroot()
    assert root.tag == "VTKFile" and root.get("type") == "Collection"
    sets = root.findall("./Collection/DataSet")
    with h5py.File(path, "r") as h:
        time = h["orbit/time"][()]
        flux = {src: h[f"heating/facet/{src}"][()] for src in ("solar", "albedo", "planet_ir")}
    assert [float(d.get("timestep")) for d in sets] == list(time)
    listed = [tmp_path / d.get("file") for d in sets]
    assert len(listed) == len(set(listed)) == len(time)
    assert sorted(files) == sorted([tmp_path / "mesh.vtu", tmp_path / "mesh_nodes.csv",
                                    tmp_path / "mesh.pvd"] + listed)
    for k, step_file in enumerate(listed):
        m = meshio.read(step_file)
        np.testing.assert_array_equal(m.points, r.geometry.vertices)
        for src, values in flux.items():
            np.testing.assert_array_equal(m.cell_data[f"absorbed_{src}"][0], values[k])
        np.testing.assert_array_equal(m.cell_data["absorbed_total"][0],
                                      flux["solar"][k] + flux["albedo"][k] + flux["planet_ir"][k])
    # the single file keeps the orbit averages
    m = meshio.read(tmp_path / "mesh.vtu")
    np.testing.assert_array_equal(m.cell_data["absorbed_total"][0], r.facet_average["total"])


def test_vtk_step_files_follow_the_turning_parts(written, tmp_path):
    # with a hinge, each step file has the vertices where the parts are at that step: here
    # the top plate turns 90 deg per step about the vertical line x = y = 0.5 (rotation of
    # a point about an axis, elementary geometry: x' = c + R(theta) (x - c))
    import dataclasses

    import meshio

    _, r = written
    t = r.trajectory.n_steps
    hinges = {"name": ("turn",), "law": ("rate",), "parent": ("",),
              "angle_deg": 90.0 * np.arange(t, dtype=float)[:, None],
              "axis": np.array([[0.0, 0.0, 1.0]]), "point": np.array([[0.5, 0.5, 0.0]]),
              "facet_hinge": np.array([-1, -1, 0, 0], np.int64)}
    turning = dataclasses.replace(r, hinges=hinges)
    export.export(turning, "vtk", tmp_path / "mesh.vtu")
    v = r.geometry.vertices
    for k in range(t):
        theta = np.radians(90.0 * k)
        c, s = np.cos(theta), np.sin(theta)
        x, y = v[4:, 0] - 0.5, v[4:, 1] - 0.5
        top = np.stack([0.5 + c * x - s * y, 0.5 + s * x + c * y, v[4:, 2]], axis=1)
        points = meshio.read(tmp_path / "mesh_steps" / f"step_{k:04d}.vtu").points
        np.testing.assert_array_equal(points[:4], v[:4])          # the bottom plate stays
        np.testing.assert_allclose(points[4:], top, rtol=0, atol=1e-12)  # metres: rounding


def test_vtk_without_an_orbit_writes_no_time_series(tmp_path):
    path = h5io.write_results(tmp_path / "out.h5", **sample_results(with_orbit=False))
    files = export.export(h5io.read_results(path), "vtk", tmp_path / "mesh.vtu")
    assert [f.name for f in files] == ["mesh.vtu", "mesh_nodes.csv"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mesh.vtu", "mesh_nodes.csv", "out.h5"]


def test_vtk_time_series_is_all_or_nothing(written, tmp_path, monkeypatch):
    # a step file that cannot be written (full disk at the fourth mesh) leaves no file of
    # the export behind: no .vtu, no node table, no step folder, no temporaries
    import errno

    import meshio

    from vfactor.atomic import OutputError

    _, r = written
    real_write = meshio.Mesh.write
    calls = []

    def failing_write(self, *args, **kwargs):
        calls.append(1)
        if len(calls) == 4:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_write(self, *args, **kwargs)

    monkeypatch.setattr(meshio.Mesh, "write", failing_write)
    with pytest.raises(OutputError, match="step 2.*no space left on device"):
        export.export(r, "vtk", tmp_path / "mesh.vtu")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.h5"]


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
