"""Tallies of Monte Carlo rounds and their statistics (means, replicate errors), sparse.

A round is one independent randomised replicate (see :mod:`vfactor.radiation`); its
tallies are integers. A node's row of ``n + 2`` columns (nodes, space, inert) holds few
non-zero counts on a real vehicle (each node sees a small share of the others), so rows
are kept as sparse (column, count) lists: :class:`PairTallies` for the rows of some
(node, round) pairs, :class:`TallySums` for their running sums. Integer sums in any order
give identical bits.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from vfactor.sparsetools import row_ids

__all__ = ["TallyStatistics", "TallySums", "PairTallies", "tally_statistics",
           "significant_mask", "SIGNIFICANCE"]

#: An entry of a view-factor row (node or space column) is *significant* when its raw value
#: is at least this share of the row (the row sums to one): 1 % of the energy the node
#: emits. Convergence (``target_error``) and ``adjustment_sigma`` look at these entries only.
SIGNIFICANCE = 1e-2


@dataclass(frozen=True)
class PairTallies:
    """Hit counts of ``k`` (node, round) pairs as sparse rows (CSR layout, no zeros).

    Attributes
    ----------
    indptr : (k + 1,) int64 — row ``p`` is ``cols[indptr[p]:indptr[p + 1]]``
    cols : int64 — columns hit, increasing within a row (0..n-1 nodes, n space, n+1 inert)
    counts : int64 — rays per column, all > 0
    n_cols : int — ``n + 2``
    """

    indptr: np.ndarray
    cols: np.ndarray
    counts: np.ndarray
    n_cols: int

    @classmethod
    def from_dense(cls, dense) -> "PairTallies":
        """The sparse rows of a dense ``(k, n + 2)`` integer tally array."""
        t = np.asarray(dense)
        if t.ndim != 2 or t.dtype.kind not in "iu":
            raise ValueError(f"PairTallies: tallies must be a 2-D integer array, got "
                             f"{t.dtype} {t.shape}")
        rows, cols = np.nonzero(t)
        indptr = np.zeros(t.shape[0] + 1, np.int64)
        np.cumsum(np.bincount(rows, minlength=t.shape[0]), out=indptr[1:])
        return cls(indptr, cols.astype(np.int64), t[rows, cols].astype(np.int64),
                   int(t.shape[1]))

    @classmethod
    def concat(cls, parts) -> "PairTallies":
        """Rows of several :class:`PairTallies` one after the other."""
        parts = list(parts)
        if not parts:
            raise ValueError("PairTallies.concat: nothing to join")
        offsets = np.cumsum([0] + [p.counts.size for p in parts[:-1]])
        indptr = np.concatenate([[0]] + [p.indptr[1:] + o for p, o in zip(parts, offsets)])
        return cls(indptr.astype(np.int64), np.concatenate([p.cols for p in parts]),
                   np.concatenate([p.counts for p in parts]), parts[0].n_cols)

    def __len__(self) -> int:
        return self.indptr.size - 1

    def row(self, p) -> "PairTallies":
        """Pair ``p`` alone."""
        lo, hi = int(self.indptr[p]), int(self.indptr[p + 1])
        return PairTallies(np.array([0, hi - lo], np.int64), self.cols[lo:hi].copy(),
                           self.counts[lo:hi].copy(), self.n_cols)

    def row_ids(self) -> np.ndarray:
        """Pair index of every stored entry."""
        return np.repeat(np.arange(len(self), dtype=np.int64), np.diff(self.indptr))

    def row_sums(self) -> np.ndarray:
        """Rays of each pair."""
        running = np.concatenate([[0], np.cumsum(self.counts, dtype=np.int64)])
        return running[self.indptr[1:]] - running[self.indptr[:-1]]

    def toarray(self) -> np.ndarray:
        """Dense ``(k, n + 2)`` int64 copy (tests and small models)."""
        out = np.zeros((len(self), self.n_cols), np.int64)
        out[self.row_ids(), self.cols] = self.counts
        return out


class TallyStatistics(NamedTuple):
    """Estimates and one-sigma errors from summed round tallies.

    Attributes
    ----------
    mean : (n, n + 2) scipy.sparse.csr_array — hit fractions per row: nodes, space, inert [1]
    stderr : (n, n + 2) csr_array — one-sigma error of ``mean``, same pattern [1]
    rays : (n,) int64 — rays emitted per row (the sum of its rounds' rays)
    """

    mean: sp.csr_array
    stderr: sp.csr_array
    rays: np.ndarray


@dataclass
class TallySums:
    """Running sums of round tallies: the whole state needed to resume or merge work.

    Sums of integers only, kept sparse: entry keys ``row * (n + 2) + column``, so adding
    rounds in any order (or merging the sums of several workers) gives identical bits.

    Attributes
    ----------
    n_nodes : int
    rays_per_round : int — ``m``, the rays of the first rounds; every round has a positive
        multiple of ``m`` rays (:func:`vfactor.tracing.vf_kernels.round_rays`)
    rounds : (n,) int64 — number of rounds added per row
    rays, rays_sq : (n,) int64 — sum over a row's rounds of their rays and of its square
    counts, squares, cross : (n, n + 2) csr_array (properties) — sum over rounds of the hit
        counts ``c`` of each entry, of ``c^2`` and of ``c`` times the round's rays
    """

    n_nodes: int
    rays_per_round: int
    rounds: np.ndarray
    rays: np.ndarray = None
    rays_sq: np.ndarray = None
    _keys: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    _sum: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    _sq: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    _x: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    _pending: list = field(default_factory=list)
    _pending_size: int = 0

    def __post_init__(self):
        if self.rays is None:
            self.rays = np.zeros(self.n_nodes, np.int64)
        if self.rays_sq is None:
            self.rays_sq = np.zeros(self.n_nodes, np.int64)

    @classmethod
    def empty(cls, n_nodes: int, rays_per_round: int) -> "TallySums":
        """Sums of no rounds for ``n_nodes`` nodes."""
        return cls(int(n_nodes), int(rays_per_round), np.zeros(int(n_nodes), np.int64))

    @property
    def n_cols(self) -> int:
        return self.n_nodes + 2

    def add(self, node_indices, tallies) -> None:
        """Add one round's tallies of the nodes ``node_indices`` (no repeats)."""
        idx = np.asarray(node_indices, dtype=np.int64).reshape(-1)
        if np.unique(idx).size != idx.size:
            raise ValueError("TallySums.add: node_indices has repeats")
        self.add_pairs(idx, tallies)

    def add_pairs(self, node_indices, tallies) -> None:
        """Add tallies of (node, round) pairs; a node may appear once per round it got.

        Parameters
        ----------
        node_indices : (k,) int — node of each pair
        tallies : PairTallies, or (k, n + 2) integer array — hit counts of each pair
        """
        idx = np.asarray(node_indices, dtype=np.int64).reshape(-1)
        t = tallies if isinstance(tallies, PairTallies) else PairTallies.from_dense(tallies)
        if len(t) != idx.size or t.n_cols != self.n_cols:
            raise ValueError(f"TallySums.add_pairs: tallies must be integer of shape "
                             f"({idx.size}, {self.n_cols}), got ({len(t)}, {t.n_cols})")
        if idx.size and (idx.min() < 0 or idx.max() >= self.n_nodes):
            raise ValueError(f"TallySums.add_pairs: nodes must be in 0..{self.n_nodes - 1}")
        rays = t.row_sums()
        m = self.rays_per_round
        if np.any((rays < m) | (rays % m != 0)):
            raise ValueError(f"TallySums.add_pairs: every tally row must sum to a positive "
                             f"multiple of rays_per_round = {m}")
        if idx.size == 0:
            return
        rows = t.row_ids()
        keys = idx[rows] * self.n_cols + t.cols
        self._pending.append((keys, t.counts, t.counts * t.counts, t.counts * rays[rows]))
        self._pending_size += keys.size
        np.add.at(self.rounds, idx, 1)
        np.add.at(self.rays, idx, rays)
        np.add.at(self.rays_sq, idx, rays * rays)
        if self._pending_size > max(1 << 22, self._keys.size):
            self._compact()

    def merge(self, other: "TallySums") -> None:
        """Add the sums of ``other`` (another worker's rounds, disjoint from ours)."""
        if other.rays_per_round != self.rays_per_round or other.n_nodes != self.n_nodes:
            raise ValueError("TallySums.merge: different rays_per_round or node count")
        other._compact()
        self._pending.append((other._keys, other._sum, other._sq, other._x))
        self._pending_size += other._keys.size
        self.rounds += other.rounds
        self.rays += other.rays
        self.rays_sq += other.rays_sq
        self._compact()

    def _compact(self) -> None:
        if not self._pending:
            return
        keys = np.concatenate([self._keys] + [p[0] for p in self._pending])
        parts = [np.concatenate([own] + [p[i] for p in self._pending])
                 for i, own in ((1, self._sum), (2, self._sq), (3, self._x))]
        order = np.argsort(keys, kind="stable")
        keys = keys[order]
        parts = [a[order] for a in parts]
        starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]]) if keys.size else \
            np.zeros(0, np.int64)
        self._keys = keys[starts]
        self._sum, self._sq, self._x = (np.add.reduceat(a, starts) if keys.size else a
                                        for a in parts)
        self._pending = []
        self._pending_size = 0

    def _csr(self, values) -> sp.csr_array:
        self._compact()
        rows, cols = np.divmod(self._keys, self.n_cols)
        indptr = np.zeros(self.n_nodes + 1, np.int64)
        np.cumsum(np.bincount(rows, minlength=self.n_nodes), out=indptr[1:])
        return sp.csr_array((values, cols, indptr), shape=(self.n_nodes, self.n_cols))

    @property
    def counts(self) -> sp.csr_array:
        self._compact()
        return self._csr(self._sum)

    @property
    def squares(self) -> sp.csr_array:
        self._compact()
        return self._csr(self._sq)

    @property
    def cross(self) -> sp.csr_array:
        self._compact()
        return self._csr(self._x)

    @property
    def nnz(self) -> int:
        """Distinct (row, column) entries hit so far."""
        self._compact()
        return int(self._keys.size)


def tally_statistics(sums: TallySums) -> TallyStatistics:
    """Hit fractions and their one-sigma errors from summed round tallies.

    Parameters
    ----------
    sums : TallySums
        Every row must have at least one round.

    Returns
    -------
    TallyStatistics — ``mean`` and ``stderr`` on the pattern of the entries ever hit (an
    entry never hit has mean 0 and error 0 by both formulas below)

    Notes
    -----
    With ``K >= 2`` rounds, round ``r`` of ``n_r`` rays gives an independent unbiased
    estimate ``c_r / n_r`` (randomised quasi-Monte Carlo replicates). The estimate is the
    share of all the row's rays, ``p = C / N`` (``C = sum c_r``, ``N = sum n_r``). When all
    rounds have the same size ``m`` its one-sigma error is the standard error of the mean
    of the replicates (Owen 2013, "Monte Carlo theory, methods and examples", ch. 17,
    eq. 17.3)::

        sigma^2 = (K sum(c^2) - (sum c)^2) / (K^2 (K - 1) m^2)

    computed in exact integer arithmetic before the one division. When the sizes differ
    (rows that got the larger later rounds), each replicate keeps its own variance, and the
    error is the ratio (cluster) estimator's, with the ``K / (K - 1)`` factor that makes it
    the formula above for equal sizes (Cochran 1977, "Sampling techniques", 3rd ed.,
    eq. 6.13 with clusters as the replicates)::

        sigma^2 = K / (K - 1) * sum (c_r - p n_r)^2 / N^2,

    expanded as ``sum c^2 - 2 p sum c n + p^2 sum n^2`` over the integer sums. With a
    single round no spread exists, and the binomial bound ``sqrt(p (1 - p) / m)`` of
    independent rays is reported instead (conservative: stratification only lowers the
    variance).
    """
    rounds = np.asarray(sums.rounds, dtype=np.int64)
    m = int(sums.rays_per_round)
    if np.any(rounds < 1):
        bad = np.flatnonzero(rounds < 1)
        raise ValueError(f"tally_statistics: rows {bad[:10].tolist()} have no rounds")
    counts = sums.counts
    squares = sums.squares
    rays = np.asarray(sums.rays, dtype=np.int64)
    uniform_row = rays == rounds * m
    row = row_ids(counts)
    c = counts.data.astype(np.int64)
    q = squares.data.astype(np.int64)
    mean = c / rays[row].astype(np.float64)
    k = rounds[row]
    if c.size and int(c.max()) < 3_000_000_000:
        num = (k * q - c * c).astype(np.float64)       # exact: < 2**63
    else:                                              # exact with Python integers
        num = (k.astype(object) * q.astype(object)
               - c.astype(object) * c.astype(object)).astype(np.float64)
    kf = k.astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = np.where(kf > 1, np.maximum(num, 0.0) / (kf * kf * (kf - 1.0) * m * m), 0.0)
        if not uniform_row.all():
            x = sums.cross.data.astype(np.float64)
            nf = rays[row].astype(np.float64)
            s2 = np.asarray(sums.rays_sq, dtype=np.float64)[row]
            resid = q.astype(np.float64) - 2.0 * mean * x + mean * mean * s2
            general = np.where(kf > 1, kf / (kf - 1.0) * np.maximum(resid, 0.0) / (nf * nf),
                               0.0)
            var = np.where(uniform_row[row], var, general)
    binomial = mean * (1.0 - mean) / rays[row]
    var = np.where(kf > 1, var, binomial)
    shape = counts.shape
    return TallyStatistics(
        mean=sp.csr_array((mean, counts.indices.copy(), counts.indptr.copy()), shape=shape),
        stderr=sp.csr_array((np.sqrt(var), counts.indices.copy(), counts.indptr.copy()),
                            shape=shape),
        rays=rays)


def significant_mask(fractions, significance: float = SIGNIFICANCE):
    """Significant entries of view-factor rows.

    Parameters
    ----------
    fractions : (n, n + 2) csr_array (or dense) — rows of node columns, space, inert [1]
    significance : float — threshold share of the row [1]

    Returns
    -------
    (n, n + 2) bool csr_array (dense when given dense) — True for node and space entries
        ``>= significance``; the inert column is never significant (it is not a coupling).
    """
    if not sp.issparse(fractions):
        f = np.asarray(fractions, dtype=np.float64)
        mask = f >= significance
        mask[:, -1] = False
        return mask
    f = sp.csr_array(fractions)
    keep = (f.data >= significance) & (f.indices != f.shape[1] - 1)
    return sp.csr_array((keep, f.indices, f.indptr), shape=f.shape)
