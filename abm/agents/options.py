"""The option space of a concealment attempt: boarding point x time band x vehicle class x depth."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..port.layout import Layout


@dataclass(frozen=True)
class OptionSpace:
    """Flat indexing of every (point, band, class, depth) option, with per-option attributes.

    Depth varies fastest, so a world with one depth level indexes its options
    exactly as (point, band, class).
    """

    n_points: int
    n_bands: int
    n_classes: int
    n_depths: int
    hazard: np.ndarray  # (K,) hazard of the option: its boarding point's plus its depth's, at most 1
    effort: np.ndarray  # (K,) effort of reaching the point
    band: np.ndarray  # (K,) band index of each option
    point: np.ndarray  # (K,) point index of each option
    depth: np.ndarray  # (K,) depth level of each option
    valid: np.ndarray  # (K,) bool: the class stops at the point and has room for somebody
    capacity: np.ndarray  # (K,) people who fit in the option's vehicle class

    @classmethod
    def from_layout(cls, layout: Layout) -> "OptionSpace":
        n_p, n_b, n_c = layout.point_hazard.shape[0], int(layout.band_of_hour.max()) + 1, layout.n_classes
        n_d = len(layout.depth_names)
        point, band, vclass, depth = np.indices((n_p, n_b, n_c, n_d)).reshape(4, -1)
        valid = (layout.point_stop_share[point, vclass] > 0) & (layout.class_capacity[vclass] > 0)
        capacity = layout.class_capacity[vclass]
        hazard = np.minimum(layout.point_hazard[point] + layout.depth_hazard[depth], 1.0)  # a 0-1 score
        return cls(n_p, n_b, n_c, n_d, hazard, layout.point_effort[point], band, point, depth, valid, capacity)

    def valid_for(self, size: int) -> np.ndarray:
        """Options a group of ``size`` can take: the whole group must fit in one vehicle."""
        return self.valid & (self.capacity >= size)

    @property
    def shape(self) -> tuple[int, int, int, int]:
        return self.n_points, self.n_bands, self.n_classes, self.n_depths

    @property
    def size(self) -> int:
        return self.n_points * self.n_bands * self.n_classes * self.n_depths

    def unravel(self, option: np.ndarray | int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(point, band, class, depth) indices of flat option indices."""
        return np.unravel_index(option, self.shape)

    def index(self, point: int, band: int, vehicle_class: int, depth: int = 0) -> int:
        """Flat index of one option."""
        return int(np.ravel_multi_index((point, band, vehicle_class, depth), self.shape))
