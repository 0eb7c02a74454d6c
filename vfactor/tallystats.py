"""Tallies of Monte Carlo rounds and their statistics (means, replicate errors).

A round is one independent randomised replicate (see :mod:`vfactor.radiation`); its
tallies are integers, summed here per node and column in any order with identical bits.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

__all__ = ["TallyStatistics", "TallySums", "tally_statistics", "significant_mask",
           "SIGNIFICANCE"]

#: An entry of a view-factor row (node or space column) is *significant* when its raw value
#: is at least this share of the row (the row sums to one): 1 % of the energy the node
#: emits. Convergence (``target_error``) and ``adjustment_sigma`` look at these entries only.
SIGNIFICANCE = 1e-2


class TallyStatistics(NamedTuple):
    """Estimates and one-sigma errors from summed round tallies.

    Attributes
    ----------
    mean : (n, n + 2) float — hit fractions per row: nodes, space, inert [1]
    stderr : (n, n + 2) float — one-sigma error of ``mean`` [1]
    rays : (n,) int64 — rays emitted per row (rounds x rays per round)
    """

    mean: np.ndarray
    stderr: np.ndarray
    rays: np.ndarray


@dataclass
class TallySums:
    """Running sums of round tallies: the whole state needed to resume or merge work.

    Sums of integers only, so adding rounds in any order (or merging the sums of several
    workers) gives identical bits.

    Attributes
    ----------
    counts : (n, n + 2) int64 — sum over rounds of the hit counts of each row
    squares : (n, n + 2) int64 — sum over rounds of the squared hit counts
    rounds : (n,) int64 — number of rounds added per row
    rays_per_round : int — rays per node in every round (the same for all rounds)
    """

    counts: np.ndarray
    squares: np.ndarray
    rounds: np.ndarray
    rays_per_round: int

    @classmethod
    def empty(cls, n_nodes: int, rays_per_round: int) -> "TallySums":
        """Sums of no rounds for ``n_nodes`` nodes."""
        n = int(n_nodes)
        return cls(np.zeros((n, n + 2), np.int64), np.zeros((n, n + 2), np.int64),
                   np.zeros(n, np.int64), int(rays_per_round))

    def add(self, node_indices, tallies) -> None:
        """Add one round's tallies of the nodes ``node_indices``.

        Parameters
        ----------
        node_indices : (k,) int — rows the tallies belong to (no repeats)
        tallies : (k, n + 2) int64 — hit counts of one round, as from :func:`trace_tallies`
        """
        idx = np.asarray(node_indices, dtype=np.int64)
        t = np.asarray(tallies)
        if t.shape != (idx.size, self.counts.shape[1]) or t.dtype.kind not in "iu":
            raise ValueError(f"TallySums.add: tallies must be integer of shape "
                             f"({idx.size}, {self.counts.shape[1]}), got {t.dtype} {t.shape}")
        if np.unique(idx).size != idx.size:
            raise ValueError("TallySums.add: node_indices has repeats")
        t = t.astype(np.int64)
        if np.any(t.sum(axis=1) != self.rays_per_round):
            raise ValueError(f"TallySums.add: every tally row must sum to rays_per_round = "
                             f"{self.rays_per_round}")
        self.counts[idx] += t
        self.squares[idx] += t * t
        self.rounds[idx] += 1

    def add_pairs(self, node_indices, tallies) -> None:
        """Add tallies of (node, round) pairs; a node may appear once per round it got.

        Parameters
        ----------
        node_indices : (k,) int — node of each pair
        tallies : (k, n + 2) int64 — hit counts of each pair (one round each)
        """
        idx = np.asarray(node_indices, dtype=np.int64)
        t = np.asarray(tallies)
        if t.shape != (idx.size, self.counts.shape[1]) or t.dtype.kind not in "iu":
            raise ValueError(f"TallySums.add_pairs: tallies must be integer of shape "
                             f"({idx.size}, {self.counts.shape[1]}), got {t.dtype} {t.shape}")
        t = t.astype(np.int64)
        if np.any(t.sum(axis=1) != self.rays_per_round):
            raise ValueError(f"TallySums.add_pairs: every tally row must sum to "
                             f"rays_per_round = {self.rays_per_round}")
        if idx.size == 0:
            return
        if np.unique(idx).size == idx.size:      # each node once: plain indexed add
            self.counts[idx] += t
            self.squares[idx] += t * t
            self.rounds[idx] += 1
            return
        order = np.argsort(idx, kind="stable")
        idx, t = idx[order], t[order]
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        rows = idx[starts]                       # unique nodes; exact integer sums
        self.counts[rows] += np.add.reduceat(t, starts, axis=0)
        self.squares[rows] += np.add.reduceat(t * t, starts, axis=0)
        self.rounds[rows] += np.diff(np.r_[starts, idx.size])

    def merge(self, other: "TallySums") -> None:
        """Add the sums of ``other`` (another worker's rounds, disjoint from ours)."""
        if other.rays_per_round != self.rays_per_round or other.counts.shape != self.counts.shape:
            raise ValueError("TallySums.merge: different rays_per_round or node count")
        self.counts += other.counts
        self.squares += other.squares
        self.rounds += other.rounds


def tally_statistics(sums: TallySums) -> TallyStatistics:
    """Hit fractions and their one-sigma errors from summed round tallies.

    Parameters
    ----------
    sums : TallySums
        Every row must have at least one round.

    Returns
    -------
    TallyStatistics

    Notes
    -----
    With ``K >= 2`` rounds of ``m`` rays, each round gives an independent unbiased estimate
    ``p_r = c_r / m`` (randomised quasi-Monte Carlo replicates). The estimate is their mean
    ``p = sum(c) / (K m)`` and its one-sigma error the standard error of the mean of the
    replicates (Owen 2013, "Monte Carlo theory, methods and examples", ch. 17, eq. 17.3)::

        sigma^2 = (K sum(c^2) - (sum c)^2) / (K^2 (K - 1) m^2)

    computed in exact integer arithmetic before the one division. With a single round no
    spread exists, and the binomial bound ``sqrt(p (1 - p) / m)`` of independent rays is
    reported instead (conservative: stratification only lowers the variance).
    """
    counts = np.asarray(sums.counts, dtype=np.int64)
    squares = np.asarray(sums.squares, dtype=np.int64)
    rounds = np.asarray(sums.rounds, dtype=np.int64)
    m = int(sums.rays_per_round)
    if np.any(rounds < 1):
        bad = np.flatnonzero(rounds < 1)
        raise ValueError(f"tally_statistics: rows {bad[:10].tolist()} have no rounds")
    rays = rounds * m
    mean = counts / rays[:, None].astype(np.float64)
    k = rounds[:, None]
    if counts.size and int(counts.max()) < 3_000_000_000:
        num = k * squares - counts * counts            # exact: < 2**63
        num = num.astype(np.float64)
    else:                                              # exact with Python integers
        num = (k.astype(object) * squares.astype(object)
               - counts.astype(object) * counts.astype(object)).astype(np.float64)
    kf = k.astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = np.where(kf > 1, np.maximum(num, 0.0) / (kf * kf * (kf - 1.0) * m * m), 0.0)
    binomial = mean * (1.0 - mean) / rays[:, None]
    var = np.where(kf > 1, var, binomial)
    return TallyStatistics(mean=mean, stderr=np.sqrt(var), rays=rays)


def significant_mask(fractions, significance: float = SIGNIFICANCE):
    """Significant entries of view-factor rows.

    Parameters
    ----------
    fractions : (n, n + 2) float — rows of node columns, space, inert [1]
    significance : float — threshold share of the row [1]

    Returns
    -------
    (n, n + 2) bool — True for node and space entries ``>= significance``; the inert column
        is never significant (it is not a coupling).
    """
    f = np.asarray(fractions, dtype=np.float64)
    mask = f >= significance
    mask[:, -1] = False
    return mask
