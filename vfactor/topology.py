"""Edge topology of a set of triangles: winding agreement, open and non-manifold edges.

Two facets that share an edge agree on their front side when they traverse that edge in
opposite directions (the orientation rule of a triangulated 2-manifold, e.g. Botsch et
al., Polygon Mesh Processing, 2010, section 1.3). Only edges shared by exactly two facets
decide: an edge shared by three or more facets (a fin standing on a panel, two bodies
touching along an edge) is non-manifold and says nothing about winding, so two separate
bodies that happen to share vertices or edges are not reported as wound inconsistently.

Facets are connected through their two-facet edges; on each connected body the
orientation of every facet relative to the first follows by propagation, which is a
search for connected components of the "double cover" graph (facet, orientation): an
agreeing edge links (a, s) with (b, s), a disagreeing one (a, s) with (b, 1 - s). A body
whose facet appears with both orientations in one component cannot be oriented at all
(a Moebius strip); otherwise the smaller of its two orientation classes is what a repair
would turn.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["EdgeReport", "edge_report", "orientation_classes", "closed_bodies"]


@dataclass(frozen=True)
class EdgeReport:
    """Edge topology of a triangle set (indices are rows of the triangles given).

    Attributes
    ----------
    disagreeing_edges : int — two-facet edges traversed the same way by both facets
    example : tuple of int or None — the two facets of the first such edge
    facets_to_turn : int — facets in the smaller orientation class of their body
    non_orientable : bool — some body cannot be oriented consistently
    open_edges : int — edges used by one facet
    non_manifold_edges : int — edges used by three or more facets
    non_manifold_example : tuple of int or None — facets at the first such edge
    """

    disagreeing_edges: int
    example: tuple | None
    facets_to_turn: int
    non_orientable: bool
    open_edges: int
    non_manifold_edges: int
    non_manifold_example: tuple | None

    @property
    def consistent(self) -> bool:
        return self.disagreeing_edges == 0


def _edges(t: np.ndarray):
    """Edges of triangles grouped: sorted (lo, hi, start, facet) and group starts/counts."""
    f = len(t)
    start = t.reshape(-1)
    end = t[:, [1, 2, 0]].reshape(-1)
    facet = np.repeat(np.arange(f), 3)
    lo, hi = np.minimum(start, end), np.maximum(start, end)
    order = np.lexsort((facet, hi, lo))
    lo, hi, start, facet = lo[order], hi[order], start[order], facet[order]
    new = np.ones(len(lo), bool)
    new[1:] = (lo[1:] != lo[:-1]) | (hi[1:] != hi[:-1])
    first = np.flatnonzero(new)
    count = np.diff(np.append(first, len(lo)))
    return start, facet, first, count


def _double_cover(f: int, start, facet, first, count):
    """Components of the double cover: (up, down) labels per facet, and the two-facet
    edges as (a, b, same_way)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    pair = first[count == 2]
    a, b = facet[pair], facet[pair + 1]
    same_way = start[pair] == start[pair + 1]
    flip = same_way.astype(np.int64)
    rows = np.concatenate([2 * a, 2 * a + 1])
    cols = np.concatenate([2 * b + flip, 2 * b + 1 - flip])
    graph = coo_matrix((np.ones(len(rows), np.int8), (rows, cols)), shape=(2 * f, 2 * f))
    _, label = connected_components(graph, directed=False)
    return label[0::2], label[1::2], a, b, same_way


def orientation_classes(triangles: np.ndarray):
    """Which facets a repair turns so that every body agrees with itself.

    Parameters
    ----------
    triangles : (f, 3) int — vertex indices (equal coordinates merged)

    Returns
    -------
    body : (f,) int — connected body of each facet (through two-facet edges), 0-based
    turn : (f,) bool — facets in the other orientation class than the body's first facet
    orientable : (f,) bool — False on bodies that cannot be oriented (left as they are)
    """
    t = np.asarray(triangles, np.int64)
    f = len(t)
    if f == 0:
        return np.zeros(0, np.int64), np.zeros(0, bool), np.zeros(0, bool)
    up, down, *_ = _double_cover(f, *_edges(t))
    orientable_facet = up != down
    key = np.minimum(up, down)
    _, body = np.unique(key, return_inverse=True)
    body = body.reshape(-1)
    bad_body = np.zeros(body.max() + 1, bool)
    bad_body[body[~orientable_facet]] = True
    first = np.full(body.max() + 1, f, np.int64)
    np.minimum.at(first, body, np.arange(f))
    reference = up[first[body]]
    turn = (up != reference) & ~bad_body[body]
    return body, turn, ~bad_body[body]


def closed_bodies(triangles: np.ndarray, body: np.ndarray) -> np.ndarray:
    """Whether each body (labels 0..b-1 per facet) is closed: every edge of its facets is
    used by exactly two facets of that body (bodies touching along an edge stay closed).
    Returns (b,) bool."""
    t = np.asarray(triangles, np.int64)
    body = np.asarray(body, np.int64)
    n_bodies = int(body.max()) + 1 if body.size else 0
    if not t.size:
        return np.zeros(n_bodies, bool)
    start = t.reshape(-1)
    end = t[:, [1, 2, 0]].reshape(-1)
    owner = np.repeat(body, 3)
    keys = np.stack([owner, np.minimum(start, end), np.maximum(start, end)], axis=1)
    uniq, count = np.unique(keys, axis=0, return_counts=True)
    open_body = np.zeros(n_bodies, bool)
    open_body[uniq[count != 2, 0]] = True
    return ~open_body


def edge_report(triangles: np.ndarray) -> EdgeReport:
    """Winding agreement and edge counts of triangles (vertex indices, (f, 3)).

    Vertices are compared by index: callers merge equal coordinates first (the mesh
    reader shares bit-identical vertices).
    """
    t = np.asarray(triangles, np.int64)
    f = len(t)
    if f == 0:
        return EdgeReport(0, None, 0, False, 0, 0, None)
    start, facet, first, count = _edges(t)
    open_edges = int((count == 1).sum())
    many = first[count >= 3]
    non_manifold_example = (tuple(int(x) for x in facet[many[0]:many[0] + 3])
                            if len(many) else None)
    up, down, a, b, same_way = _double_cover(f, start, facet, first, count)
    bad = np.flatnonzero(same_way)
    example = None
    if len(bad):
        k = bad[np.argmin(np.minimum(a[bad], b[bad]))]
        example = (int(min(a[k], b[k])), int(max(a[k], b[k])))
    non_orientable = bool((up == down).any())
    turn = 0
    if len(bad) and not non_orientable:
        # a body is the pair of components {up[i], down[i]}; the class of facet i is the
        # component of its orientation 0; count both classes per body
        body = np.minimum(up, down)
        cls = (up > down).astype(np.int64)
        n_body = np.bincount(body)
        n_cls1 = np.bincount(body, weights=cls, minlength=len(n_body)).astype(np.int64)
        turn = int(np.minimum(n_cls1, n_body - n_cls1).sum())
    return EdgeReport(disagreeing_edges=int(len(bad)), example=example,
                      facets_to_turn=turn, non_orientable=non_orientable,
                      open_edges=open_edges, non_manifold_edges=int(len(many)),
                      non_manifold_example=non_manifold_example)
