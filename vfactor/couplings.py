"""Records of radiative couplings: view factors and exchange (Gebhart factors, areas).

Rows belong to emitting nodes; the columns and units are those of
:mod:`vfactor.radiation`. Built by :func:`vfactor.radiation.view_factors_from_tallies`
and :func:`vfactor.exchange.compute_exchange`; written and read by :mod:`vfactor.h5io`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = ["ViewFactors", "Exchange"]


@dataclass(frozen=True)
class ViewFactors:
    """Node-to-node view factors with their statistical error.

    Attributes
    ----------
    matrix : (n, n) scipy.sparse.csr_array — smoothed view factors; row i = from node i [1]
        (every (n, n) field is a CSR array holding the entries ever hit; dense copies with
        :func:`vfactor.sparsetools.dense`)
    space : (n,) float — smoothed view factor to deep space [1]
    inert : (n,) float — share of emitted rays lost on inert sides [1]
    stderr : (n, n) csr_array — one-sigma statistical error of each raw entry [1]: standard
        error of the mean over independent randomised replicates (rounds), see
        :func:`vfactor.tallystats.tally_statistics`
    stderr_space : (n,) float — one-sigma error of ``raw_space`` [1]
    raw_matrix, raw_space, raw_inert : as above, straight from the tallies (no smoothing) [1]
    rays : (n,) int64 — rays emitted per node
    adjustment_sigma : float — largest |smoothed - raw| / stderr over significant entries
        (node and space entries >= :data:`vfactor.tallystats.SIGNIFICANCE` of their row) [1]
    method : str — name of the smoothing method
    converged : bool — True when ``target_error`` was reached (True when none was asked)
    target_error : float or None — requested one-sigma error of significant entries [1]
    facet_matrix : scipy.sparse.csr_matrix or None — facet-side-to-node-side factors on request
    smoothed_stderr : (n, n) csr_array or None — one-sigma error of each delivered entry of
        ``matrix`` [1]: with smoothing, the reciprocity combination of the pair's two raw
        estimates (:func:`vfactor.delivered.delivered_stderr`; an upper bound, closure left
        out), never above ``stderr``; the diagonal keeps its raw error; without smoothing
        ``stderr`` itself. None only on records built by hand or read from files written
        before it existed
    smoothed_stderr_space : (n,) float or None — one-sigma error of ``space`` [1]: space
        has no reciprocal, so it is ``stderr_space``
    """

    matrix: sp.csr_array
    space: np.ndarray
    inert: np.ndarray
    stderr: sp.csr_array
    stderr_space: np.ndarray
    raw_matrix: sp.csr_array
    raw_space: np.ndarray
    raw_inert: np.ndarray
    rays: np.ndarray
    adjustment_sigma: float
    method: str
    converged: bool
    target_error: float | None = None
    facet_matrix: object = None
    smoothed_stderr: sp.csr_array | None = None
    smoothed_stderr_space: np.ndarray | None = None

    def largest_relative_error(self, level: float) -> float:
        """Largest ``stderr / F`` over raw node entries ``F >= level`` (NaN when none)."""
        raw, err = self.raw_matrix, self.stderr
        if raw.nnz == 0:
            return math.nan
        same = (raw.nnz == err.nnz and np.array_equal(raw.indptr, err.indptr)
                and np.array_equal(raw.indices, err.indices))
        e = err.data if same else np.asarray(err[raw.nonzero()]).ravel()
        sig = raw.data >= level
        return float((e[sig] / raw.data[sig]).max()) if sig.any() else math.nan

    def largest_delivered_relative_error(self, level: float) -> float:
        """Largest ``smoothed_stderr / F`` over delivered node and space entries ``F >=
        level`` (NaN when none; the raw :meth:`largest_relative_error` when the record
        has no ``smoothed_stderr``)."""
        if self.smoothed_stderr is None:
            return self.largest_relative_error(level)
        from .sparsetools import as_csr, values_at

        m = as_csr(self.matrix)
        rows, cols = m.nonzero()
        val = values_at(m, rows, cols)
        err = values_at(as_csr(self.smoothed_stderr), rows, cols)
        val = np.concatenate([val, np.asarray(self.space, float)])
        err = np.concatenate([err, np.asarray(self.smoothed_stderr_space, float)])
        sig = val >= level
        return float((err[sig] / val[sig]).max()) if sig.any() else math.nan


@dataclass(frozen=True)
class Exchange:
    """Gebhart (absorption) factors and exchange areas in one band.

    Attributes
    ----------
    gebhart : (n, n) csr_array — B_ij, share of energy emitted by i absorbed by j [1]
    gebhart_space : (n,) float — share of energy emitted by i that escapes to space [1]
    area : (n, n) csr_array — exchange area eps_i A_i B_ij [m2]; conductance = sigma * area
    area_space : (n,) float — eps_i A_i B_i,space [m2]
    stderr : (n, n) csr_array or None — one-sigma error of ``gebhart`` where it was
        estimated [1]
    method : str — ``"matrix"`` (diffuse linear solve) or ``"monte-carlo"`` (reflection tracing)
    band : str — ``"ir"`` or ``"solar"``
    dropped : (n,) float — share of each node's emission carried by entries left out below
        the drop tolerance (reported, never silently lost) [1]
    drop_tolerance : float — entries below this share of a node's emission were left out
        (0: none; the traced route keeps every entry) [1]
    """

    gebhart: sp.csr_array
    gebhart_space: np.ndarray
    area: sp.csr_array
    area_space: np.ndarray
    stderr: sp.csr_array | None
    method: str
    band: str = "ir"
    dropped: np.ndarray | None = None
    drop_tolerance: float = 0.0
