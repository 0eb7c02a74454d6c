"""Solver tables of vfactor.tables: conductances.csv and the wide tables along the orbit
read back to the results file bit for bit, and have the shape a network solver takes."""

from __future__ import annotations

import csv
import dataclasses
from types import SimpleNamespace

import h5py
import numpy as np
import pytest
import scipy.sparse as sp

from vfactor import cli, h5io, tables
from vfactor.constants import STEFAN_BOLTZMANN
from vfactor.errors import ArgumentError
from vfactor.h5read import read_coupling_matrix
from vfactor.heating import SOURCES

from results_sample import sample_results


@pytest.fixture
def written(tmp_path):
    path = h5io.write_results(tmp_path / "out.h5", **sample_results())
    return path, h5io.read_results(path)


def _read(path):
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def _matrix(h, key):
    return read_coupling_matrix(h[key]).toarray()


# ---------------------------------------------------------------------------------------
# conductances.csv
# ---------------------------------------------------------------------------------------
def test_conductance_table_reads_back_and_is_symmetric(written, tmp_path):
    path, r = written
    tables.export_csv(r, tmp_path / "csv")
    header, rows = _read(tmp_path / "csv" / "conductances.csv")
    assert header == ["node_a", "node_b", "exchange_area [m2]", "conductance [W K-4]",
                      "view_factor_ab [1]", "view_factor_ab_stderr [1]", "view_factor_ba [1]",
                      "view_factor_ba_stderr [1]"]
    with h5py.File(path, "r") as h:
        names = list(h["nodes/name"].asstr()[()])
        index = {name: k for k, name in enumerate(names)}
        area, f, err = (_matrix(h, k) for k in ("exchange/area", "view_factors/matrix",
                                                 "view_factors/stderr"))
        area_space = h["exchange/area_space"][()]
        f_space, err_space = h["view_factors/space"][()], h["view_factors/stderr_space"][()]
        eps, node_area = h["nodes/ir_emissivity"][()], h["nodes/area"][()]
        gebhart = _matrix(h, "exchange/gebhart")
    pairs = [row for row in rows if row[1] != tables.SPACE]
    space = [row for row in rows if row[1] == tables.SPACE]
    keys = [(index[a], index[b]) for a, b, *_ in pairs]
    assert all(i < j for i, j in keys)                      # no self terms, no i > j
    assert len(set(keys)) == len(keys)                      # no duplicates
    n = len(names)
    assert set(keys) == {(i, j) for i in range(n) for j in range(i + 1, n)
                         if (area[i, j] + area[j, i]) / 2 != 0.0}
    for (i, j), row in zip(keys, pairs):
        value = float(row[2])
        assert value == (area[i, j] + area[j, i]) / 2
        assert value == (area[j, i] + area[i, j]) / 2          # the same whichever is "a"
        # conductance = sigma x exchange area, sigma from CODATA 2018 (exact in the 2019 SI)
        assert STEFAN_BOLTZMANN == 5.670374419e-8
        assert float(row[3]) == STEFAN_BOLTZMANN * value
        assert [float(x) for x in row[4:]] == [f[i, j], err[i, j], f[j, i], err[j, i]]
        # the sample's Gebhart factors come from the diffuse grey linear solve, so they obey
        # reciprocity eps_i A_i B_ij = eps_j A_j B_ji (B. Gebhart 1961, Int. J. Heat Mass
        # Transfer 3, 341-346): the mean is either side to float64 rounding
        for a, b in ((i, j), (j, i)):
            assert value == pytest.approx(eps[a] * node_area[a] * gebhart[a, b], rel=1e-12)
    # one row per node to space, in node order; space -> node is not defined: empty
    assert [row[0] for row in space] == names
    for i, row in enumerate(space):
        assert float(row[2]) == area_space[i]
        assert float(row[3]) == STEFAN_BOLTZMANN * area_space[i]
        assert [float(row[4]), float(row[5])] == [f_space[i], err_space[i]]
        assert row[6:] == ["", ""]


def _asymmetric(n=6, seed=11):
    """A seeded (n, n) sparse 'exchange area' [m2] with entries stored one way only, a
    pair stored both ways as explicit zeros, and a diagonal."""
    rng = np.random.default_rng(seed)
    dense = rng.uniform(0.0, 1.0, (n, n)) * (rng.uniform(size=(n, n)) < 0.5)
    dense[0, 1], dense[1, 0] = 0.25, 0.0          # stored one way only
    dense[2, 3] = dense[3, 2] = 0.0               # stored, but zero (below)
    np.fill_diagonal(dense, rng.uniform(0.1, 1.0, n))
    rows, cols = np.nonzero(dense)
    rows, cols = np.append(rows, [2, 3]), np.append(cols, [3, 2])
    m = sp.csr_array((dense[rows, cols], (rows, cols)), shape=(n, n))
    assert m.nnz == np.count_nonzero(dense) + 2   # the explicit zeros are stored
    return dense, m


def test_conductor_pairs_against_a_dense_rebuild():
    # the pair list equals a plain double loop over the dense matrix (our own rebuild), for
    # an asymmetric pattern; with self terms the diagonal joins; transposing the input
    # changes nothing, bit for bit
    dense, area = _asymmetric()
    n = dense.shape[0]
    f = sp.csr_array(dense * 0.1)
    err = sp.csr_array(dense * 0.01)
    vf = SimpleNamespace(matrix=f, stderr=err)
    for self_terms in (False, True):
        p = tables.conductor_pairs(vf, SimpleNamespace(area=area), self_terms=self_terms)
        expected = [(i, j, (dense[i, j] + dense[j, i]) / 2) for i in range(n)
                    for j in range(i if self_terms else i + 1, n)
                    if (dense[i, j] + dense[j, i]) / 2 != 0.0]
        assert list(zip(p.node_a.tolist(), p.node_b.tolist(), p.exchange_area.tolist())) == expected
        assert (0, 1) in set(zip(p.node_a.tolist(), p.node_b.tolist()))    # one-sided entry
        assert (2, 3) not in set(zip(p.node_a.tolist(), p.node_b.tolist()))  # stored zeros
        assert p.view_factor_ab.tolist() == [0.1 * dense[i, j] for i, j, _ in expected]
        assert p.view_factor_ba_stderr.tolist() == [0.01 * dense[j, i] for i, j, _ in expected]
        flipped = tables.conductor_pairs(vf, SimpleNamespace(area=area.T.tocsr()),
                                         self_terms=self_terms)
        assert flipped.exchange_area.tobytes() == p.exchange_area.tobytes()


def test_self_terms_flag_lists_the_diagonal(tmp_path, capsys):
    # `vfactor export --format csv --self-terms`: the rows a == b appear, with the node's
    # own exchange area; without the flag they do not
    kw = sample_results()
    ex = kw["exchange"]
    own = np.array([0.01, 0.02])            # invented self exchange areas [m2]
    kw["exchange"] = dataclasses.replace(ex, area=np.asarray(ex.area) + np.diag(own))
    path = h5io.write_results(tmp_path / "self.h5", **kw)
    for flag, folder in (([], "plain"), (["--self-terms"], "self")):
        assert cli.main(["export", str(path), "--format", "csv", "-o",
                         str(tmp_path / folder), "-q", *flag]) == 0
    _, plain = _read(tmp_path / "plain" / "conductances.csv")
    _, with_self = _read(tmp_path / "self" / "conductances.csv")
    assert not [row for row in plain if row[0] == row[1]]
    diagonal = [row for row in with_self if row[0] == row[1]]
    assert [row[0] for row in diagonal] == ["bottom", "top"]
    with h5py.File(path, "r") as h:
        area = _matrix(h, "exchange/area")
    assert [float(row[2]) for row in diagonal] == [area[0, 0], area[1, 1]]
    assert len(with_self) == len(plain) + 2


# ---------------------------------------------------------------------------------------
# Wide tables along the orbit
# ---------------------------------------------------------------------------------------
def _wide(path):
    header, rows = _read(path)
    return header, np.array([[float(x) for x in row] for row in rows])


def test_wide_tables_read_back_bit_for_bit(written, tmp_path):
    path, r = written
    tables.export_csv(r, tmp_path / "csv")
    with h5py.File(path, "r") as h:
        names = list(h["nodes/name"].asstr()[()])
        time, sun = h["orbit/time"][()], h["orbit/sun_fraction"][()]
        area = h["nodes/area"][()]
        absorbed = {src: h[f"heating/{src}"][()] for src in SOURCES}
        incident = {src: h[f"heating/incident_{src}"][()] for src in SOURCES}
        planet_ir = float(h["heating"].attrs["planet_ir_W_m2"])
        assert h["heating/solar"].attrs["units"] == "W"
    absorbed["total"] = absorbed["solar"] + absorbed["albedo"] + absorbed["planet_ir"]
    t = len(time)
    expected = {f"loads_{s}.csv": (v, "W") for s, v in absorbed.items()}
    # flux = power / area (definition of flux; 0 on a node without area)
    expected.update({f"flux_{s}.csv": (np.where(area > 0, v / area, 0.0), "W m-2")
                     for s, v in absorbed.items()})
    expected.update({f"incident_{s}.csv": (v, "W") for s, v in incident.items()})
    # view factor to the planet: incident planet IR = E A F for a Lambertian planet of
    # uniform exitance E (definition of the view factor; Siegel & Howell, Thermal
    # Radiation Heat Transfer, 4th ed., ch. 4, from memory)
    expected["planet_view_unblocked.csv"] = (incident["planet_ir"] / (planet_ir * area), "1")
    for name, (values, unit) in expected.items():
        header, table = _wide(tmp_path / "csv" / name)
        assert header == ["time [s]", "sun_fraction [1]"] + [f"{x} [{unit}]" for x in names]
        assert table.shape == (t + 1, 2 + len(names))          # the steps and the closing row
        assert table[:t, 0].tobytes() == time.tobytes(), name
        assert table[:t, 1].tobytes() == sun.tobytes(), name
        assert table[:t, 2:].tobytes() == values.tobytes(), name
    # the total is the sum heat_loads.csv lists
    header, rows = _read(tmp_path / "csv" / "heat_loads.csv")
    total = np.array([float(row[-1]) for row in rows]).reshape(t, len(names))
    assert _wide(tmp_path / "csv" / "loads_total.csv")[1][:t, 2:].tobytes() == total.tobytes()


def test_closing_row_repeats_step_zero_one_period_later(written, tmp_path):
    # common practice for a periodic load table: the first sample again at t0 + period, so
    # that interpolation over one period needs no wrap-around
    path, r = written
    tables.export_csv(r, tmp_path / "csv")
    with h5py.File(path, "r") as h:
        period = float(h["orbit"].attrs["period_s"])
    for name in ("loads_total.csv", "flux_solar.csv", "incident_albedo.csv",
                 "planet_view_unblocked.csv"):
        _, table = _wide(tmp_path / "csv" / name)
        assert table[-1, 0] == table[0, 0] + period == period
        assert table[-1, 1:].tobytes() == table[0, 1:].tobytes()


def test_closing_time_only_for_evenly_spaced_whole_orbits():
    # our own rule (vfactor.tables.closing_time, as vfactor.trajectory.orbit_facts calls a
    # span periodic): t steps of an even gap must span whole periods
    period = 5676.0
    one = np.arange(8) * period / 8
    assert tables.closing_time(one, period) == period
    assert tables.closing_time(np.arange(16) * period / 8, period) == 2 * period
    assert tables.closing_time(100.0 + one, period) == 100.0 + period
    assert tables.closing_time(np.arange(8) * 700.0, period) is None       # 5600 s, not 5676
    uneven = one.copy()
    uneven[3] += 1.0                                                         # a 1 s jitter
    assert tables.closing_time(uneven, period) is None
    assert tables.closing_time(one[:1], period) is None
    assert tables.closing_time(one, 0.0) is None


def test_no_closing_row_when_the_steps_are_not_whole_orbits(tmp_path):
    kw = sample_results()
    tr = kw["trajectory"]
    kw["trajectory"] = dataclasses.replace(tr, time=np.arange(tr.n_steps) * 700.0)
    path = h5io.write_results(tmp_path / "part.h5", **kw)
    r = h5io.read_results(path)
    tables.export_csv(r, tmp_path / "csv")
    _, table = _wide(tmp_path / "csv" / "loads_solar.csv")
    assert table.shape[0] == tr.n_steps
    assert table[:, 0].tobytes() == r.trajectory.time.tobytes()


def test_flux_and_planet_view_guard_zero_area_and_zero_planet_ir(written, tmp_path):
    # a node without area has no flux (0, not a division by zero); without planet IR the
    # incident power carries no view factor, and that table is left out
    power = np.array([[2.0, 3.0], [4.0, 6.0]])
    area = np.array([0.0, 1.5])
    np.testing.assert_array_equal(tables.per_area(power, area), [[0.0, 2.0], [0.0, 4.0]])
    np.testing.assert_array_equal(tables.planet_view_factor(power, 2.0, area),
                                  [[0.0, 3.0 / (2.0 * 1.5)], [0.0, 6.0 / (2.0 * 1.5)]])
    with pytest.raises(ArgumentError, match="planet IR flux must be > 0.*0.0"):
        tables.planet_view_factor(power, 0.0, area)
    _, r = written
    dark = dataclasses.replace(r, heating=dataclasses.replace(r.heating, planet_ir=0.0))
    files = tables.export_csv(dark, tmp_path / "csv")
    assert "planet_view_unblocked.csv" not in [f.name for f in files]
    assert "loads_planet_ir.csv" in [f.name for f in files]


def test_table_names_are_the_files_written(written, tmp_path):
    _, r = written
    files = tables.export_csv(r, tmp_path / "csv")
    assert [f.name for f in files] == tables.table_names(r)
    assert sorted(p.name for p in (tmp_path / "csv").iterdir()) == sorted(tables.table_names(r))
    bare = h5io.read_results(h5io.write_results(tmp_path / "bare.h5",
                                                **sample_results(with_orbit=False)))
    assert tables.table_names(bare) == ["nodes.csv", "couplings.csv", "conductances.csv"]
    assert [f.name for f in tables.export_csv(bare, tmp_path / "bare")] == tables.table_names(bare)
