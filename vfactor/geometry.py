"""The model's geometry as one flat set of facet arrays, and its node table.

Built from a :class:`vfactor.model.Model` by :func:`build_geometry`. Every later stage (ray
tracing, couplings, heating, output) reads only these arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Coating", "NodeTable", "Geometry"]


@dataclass(frozen=True)
class Coating:
    """A thermo-optical property set (one ``[coatings.NAME]`` table).

    Attributes
    ----------
    name : str
    solar_absorptivity : float — alpha in the solar band [1]
    ir_emissivity : float — epsilon in the infrared band [1]
    solar_specular : float — share of reflected solar energy reflected specularly [1]
    ir_specular : float — share of reflected infrared energy reflected specularly [1]
    """

    name: str
    solar_absorptivity: float
    ir_emissivity: float
    solar_specular: float = 0.0
    ir_specular: float = 0.0


@dataclass(frozen=True)
class NodeTable:
    """Radiation nodes: named groups of facet sides sharing one coating.

    Attributes
    ----------
    names : tuple of str, (n,)
    area : (n,) float — sum of the areas of the facet sides assigned to the node [m2]
    solar_absorptivity, ir_emissivity, solar_specular, ir_specular : (n,) float [1]
    coating : tuple of str, (n,) — coating name of each node
    facet_count : (n,) int — number of facet sides assigned to the node
    """

    names: tuple
    area: np.ndarray
    solar_absorptivity: np.ndarray
    ir_emissivity: np.ndarray
    solar_specular: np.ndarray
    ir_specular: np.ndarray
    coating: tuple
    facet_count: np.ndarray

    def __len__(self) -> int:
        return len(self.names)

    def index(self, name: str) -> int:
        """Index of the node called ``name`` (raises KeyError with the known names)."""
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no node named {name!r}; nodes are {', '.join(self.names)}") from None


@dataclass(frozen=True)
class Geometry:
    """Flat triangle arrays of the whole model (model frame = body frame, metres).

    Attributes
    ----------
    vertices : (v, 3) float — vertex coordinates [m]
    triangles : (f, 3) int64 — vertex indices, counter-clockwise seen from the front
    normals : (f, 3) float — unit normal of the front side [1]
    areas : (f,) float — facet areas [m2]
    centroids : (f, 3) float — facet centroids [m]
    front_node, back_node : (f,) int32 — node of each side, -1 where the side is inert
    front_coating, back_coating : (f,) int32 — index into ``coatings``, -1 where inert
    part : (f,) int32 — index into ``part_names``
    part_names : tuple of str
    coatings : tuple of Coating
    nodes : NodeTable
    """

    vertices: np.ndarray
    triangles: np.ndarray
    normals: np.ndarray
    areas: np.ndarray
    centroids: np.ndarray
    front_node: np.ndarray
    back_node: np.ndarray
    front_coating: np.ndarray
    back_coating: np.ndarray
    part: np.ndarray
    part_names: tuple
    coatings: tuple
    nodes: NodeTable

    @property
    def n_facets(self) -> int:
        return int(self.triangles.shape[0])

    @property
    def n_nodes(self) -> int:
        return len(self.nodes)
