"""The raster grid every field of a run lives on.

Axis order is always (row, col) = (y, x) with row 0 at the top, as in the
raster. Coordinates are in metres in a projected CRS.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True, eq=False)
class Grid:
    """A north-up raster grid in a projected CRS.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    x0, y0 : float
        Map coordinates of the top-left corner of the top-left cell, metres.
    dx, dy : float
        Cell width and height, metres (both positive; rows go south).
    crs_wkt : str
        The coordinate reference system as WKT (empty for an unknown CRS,
        which only tests use).
    mask : numpy.ndarray of bool, optional
        ``True`` on cells with data (habitat known). Default: all cells.
    """

    shape: tuple[int, int]
    x0: float
    y0: float
    dx: float
    dy: float
    crs_wkt: str = ""
    mask: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]

    def __post_init__(self) -> None:
        shape = (int(self.shape[0]), int(self.shape[1]))
        object.__setattr__(self, "shape", shape)
        if self.dx <= 0 or self.dy <= 0:
            raise ValueError("cell sizes dx and dy must be positive (metres)")
        if self.mask is None:
            object.__setattr__(self, "mask", np.ones(shape, dtype=bool))
        else:
            m = np.ascontiguousarray(self.mask, dtype=bool)
            if m.shape != shape:
                raise ValueError(f"mask shape {m.shape} does not match grid shape {shape}")
            object.__setattr__(self, "mask", m)

    # --- sizes -----------------------------------------------------------
    @property
    def ny(self) -> int:
        """Number of rows."""
        return self.shape[0]

    @property
    def nx(self) -> int:
        """Number of columns."""
        return self.shape[1]

    @property
    def n_cells(self) -> int:
        """Number of cells with data."""
        return int(self.mask.sum())

    @property
    def cell_area_km2(self) -> float:
        """Area of one cell, km²."""
        return self.dx * self.dy / 1e6

    @property
    def width_m(self) -> float:
        """East–west extent, metres."""
        return self.nx * self.dx

    @property
    def height_m(self) -> float:
        """North–south extent, metres."""
        return self.ny * self.dy

    # --- coordinates -----------------------------------------------------
    @property
    def x(self) -> np.ndarray:
        """Easting of cell centres, metres, shape ``(cols,)``."""
        return self.x0 + (np.arange(self.nx) + 0.5) * self.dx

    @property
    def y(self) -> np.ndarray:
        """Northing of cell centres, metres, shape ``(rows,)`` (decreasing)."""
        return self.y0 - (np.arange(self.ny) + 0.5) * self.dy

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """``(left, bottom, right, top)`` in metres."""
        return (self.x0, self.y0 - self.height_m, self.x0 + self.width_m, self.y0)

    @property
    def gdal_transform(self) -> tuple[float, float, float, float, float, float]:
        """GDAL geotransform ``(x0, dx, 0, y0, 0, -dy)``."""
        return (self.x0, self.dx, 0.0, self.y0, 0.0, -self.dy)

    def rowcol(self, x: float, y: float) -> tuple[int, int]:
        """Row and column of the cell holding map point ``(x, y)`` (metres).

        The result may lie outside the grid; check with :meth:`contains`.
        """
        col = int(np.floor((x - self.x0) / self.dx))
        row = int(np.floor((self.y0 - y) / self.dy))
        return row, col

    def contains(self, x: float, y: float) -> bool:
        """Whether map point ``(x, y)`` (metres) lies on a cell with data."""
        row, col = self.rowcol(x, y)
        return 0 <= row < self.ny and 0 <= col < self.nx and bool(self.mask[row, col])

    def distance_to(self, x: float, y: float) -> np.ndarray:
        """Distance of every cell centre from map point ``(x, y)``, metres."""
        return np.hypot(self.x[None, :] - x, self.y[:, None] - y)

    def with_mask(self, mask: np.ndarray) -> Grid:
        """The same grid with another data mask."""
        return Grid(self.shape, self.x0, self.y0, self.dx, self.dy, self.crs_wkt, mask)
