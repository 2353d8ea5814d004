"""Spatial neighbourhoods of probe sites: the sites of the same shank within a radius.

Neighbourhoods overlap (unlike channel groups) and are symmetric: site b is in the neighbourhood
of site a exactly when a is in b's. They are found per shank on a grid of square cells one radius
wide (the classic cell-list method of short-range neighbour search): a site's neighbours can only lie
in its own cell and the 8 around it, so building them costs O(sites x sites per 3 x 3 cells), never a
distance matrix of all site pairs (and no k-d tree library to import at every start); detection then
visits each site's own list.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rigside.core.errors import ParamError


@dataclass
class Neighbourhoods:
    """Every site's neighbours in compressed rows: the neighbours of site ``c`` are
    ``members[offsets[c]:offsets[c + 1]]`` (sorted, ``c`` itself included)."""

    offsets: np.ndarray   # int64, sites + 1
    members: np.ndarray   # int64
    radius_um: float

    def of(self, channel: int) -> np.ndarray:
        """The neighbours of one site (itself included)."""
        return self.members[self.offsets[channel]:self.offsets[channel + 1]]

    @property
    def sizes(self) -> np.ndarray:
        """Number of sites in each neighbourhood."""
        return np.diff(self.offsets)


def neighbourhoods(positions: np.ndarray, shank: np.ndarray, radius_um: float) -> Neighbourhoods:
    """Each site's neighbourhood: the sites of its shank within ``radius_um`` (distance at most the radius).

    Parameters
    ----------
    positions
        ``(sites, 2)`` x and y in micrometres.
    shank
        Shank of each site.
    radius_um
        Neighbourhood radius (um), above 0.

    Returns
    -------
    Neighbourhoods
        Sorted member lists, each holding its own site.
    """
    if not (np.isfinite(radius_um) and radius_um > 0):
        raise ParamError(f"neighbourhood radius must be above 0 um, got {radius_um!r}")
    positions = np.asarray(positions, dtype=np.float64)
    shank = np.asarray(shank)
    lists: list[np.ndarray] = [np.empty(0, np.int64)] * len(positions)
    reach = radius_um * (1 + 1e-9)  # a hair above the radius: sites exactly at the radius count despite rounding
    for k in np.unique(shank):
        sites = np.flatnonzero(shank == k)
        cell = np.floor(positions[sites] / radius_um).astype(np.int64)
        cells: dict[tuple[int, int], list[int]] = {}
        for site, (cx, cy) in zip(sites, cell.tolist()):
            cells.setdefault((cx, cy), []).append(int(site))
        for site, (cx, cy) in zip(sites, cell.tolist()):
            around = (cells.get((cx + dx, cy + dy), ()) for dx in (-1, 0, 1) for dy in (-1, 0, 1))
            near = np.array(sorted(s for cell_sites in around for s in cell_sites), dtype=np.int64)
            d = np.hypot(*(positions[near] - positions[site]).T)
            lists[site] = near[d <= reach]
    sizes = np.array([len(m) for m in lists], dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    members = np.concatenate(lists).astype(np.int64) if lists else np.empty(0, np.int64)
    return Neighbourhoods(offsets, members, float(radius_um))
