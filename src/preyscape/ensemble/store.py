"""The member store: every member's summaries in one zarr store with a ``member`` dimension.

Why zarr (format 3) and not NetCDF: members finish in any order and each one
is written as its own chunks (one member per chunk), each chunk file renamed
into place, so members never share a byte of storage and an interrupted
write touches only the member being written. An HDF5-based NetCDF file is one
file with shared metadata and B-trees: appending from one process while
another may be killed can damage the whole file. The store opens lazily with
``xarray.open_zarr`` (every variable a dask array), so summaries across
members read one member's chunk at a time.

Layout (``members.zarr``):

=====================  ===================================  =============================
variable               dims                                 meaning
=====================  ===================================  =============================
``<sp>_mean``          variant, member, y, x                time-mean density, animals/km²
``<sp>_margin``        variant, member, y, x                timing margin R/n, animals/km²
``<sp>_persistence``   variant, member, y, x                share of snapshots present (0–1)
``<sp>_final``         variant, member, y, x                density at the end, animals/km²
``<sp>_arrival``       variant, member, y, x                first time at or above the arrival
                                                            density, years (NaN: never)
``<sp>_total``         variant, member, time                animals in the landscape
``status``             variant, member                      0 not run, 1 stored, 2 failed
``step``               variant, member                      the member's step, years
``value``              member, parameter                    drawn values (the key's unit)
``seed``               member                               the member's ``run.seed``
``mask``               y, x                                 1 where the cell has data
=====================  ===================================  =============================

A member counts as stored only when its ``status`` is set, which is written
after all its other chunks: a reader never takes a half-written member, and
a rerun writes any member without a status again.

Examples
--------
>>> import numpy as np
>>> from preyscape.landscape.grid import Grid
>>> from preyscape.ensemble.design import Parameter, plan_design
>>> g = Grid((2, 3), 0.0, 200.0, 100.0, 100.0, "")
>>> d = plan_design([Parameter("prey.growth", "uniform", 1.0, 2.0)], members=4,
...                 design="latin-hypercube", seed=1)
>>> st = MemberStore.create(out_folder / "m.zarr", grid=g, variants=["baseline"],
...                         design=d, times=np.array([0.0, 0.5]), attrs={"plan": "x"})
>>> st.todo()
[('baseline', 0), ('baseline', 1), ('baseline', 2), ('baseline', 3)]
>>> open_members(out_folder / "m.zarr").sizes["member"]
4
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from preyscape.errors import FileProblem
from preyscape.store import SPECIES

__all__ = ["MemberStore", "STATUS", "open_members"]

STATUS = {0: "not run", 1: "stored", 2: "failed"}
"""Codes of the ``status`` variable."""

_MAPS = ("mean", "margin", "persistence", "final", "arrival")
_UNITS = {"mean": "animals per km2", "margin": "animals per km2", "persistence": "1",
          "final": "animals per km2", "arrival": "year"}
_LONG = {"mean": "time-mean density over the snapshots after the start",
         "margin": "timing margin over the snapshots after the start: adjusted range of the "
                   "cumulative departures from the time mean (Hurst 1951) over the number "
                   "of snapshots",
         "persistence": "share of the snapshots after the start with density at or above "
                        "the presence threshold",
         "final": "density at the end of the run",
         "arrival": "first time the density reached the arrival threshold (NaN: never)"}


def _skeleton(grid, variants, design, times, attrs):
    import dask.array as da
    import xarray as xr

    nv, nm, nt = len(variants), design.members, len(times)
    ny, nx = grid.shape
    data = {}
    for sp in SPECIES:
        for m in _MAPS:
            data[f"{sp}_{m}"] = xr.Variable(
                ("variant", "member", "y", "x"),
                da.full((nv, nm, ny, nx), np.nan, dtype=np.float32, chunks=(1, 1, ny, nx)),
                {"units": _UNITS[m], "long_name": f"{sp}: {_LONG[m]}",
                 "grid_mapping": "spatial_ref"})
        data[f"{sp}_total"] = xr.Variable(
            ("variant", "member", "time"),
            da.full((nv, nm, nt), np.nan, dtype=np.float64, chunks=(1, 1, nt)),
            {"units": "1", "long_name": f"{sp} animals in the whole landscape"})
    data["status"] = xr.Variable(("variant", "member"),
                                 da.zeros((nv, nm), dtype=np.int8, chunks=(1, 1)),
                                 {"long_name": "0 not run, 1 stored, 2 failed"})
    data["step"] = xr.Variable(("variant", "member"),
                               da.full((nv, nm), np.nan, chunks=(1, 1)),
                               {"units": "year", "long_name": "the member's time step"})
    data["value"] = xr.Variable(("member", "parameter"), design.values,
                                {"long_name": "drawn value of each uncertain parameter (the "
                                              "unit of its scenario key)"})
    data["seed"] = xr.Variable(("member",), np.asarray(design.seeds, dtype=np.uint64),
                               {"long_name": "the member's run.seed"})
    data["mask"] = xr.Variable(("y", "x"), grid.mask.astype(np.uint8),
                               {"long_name": "cell has habitat data"})
    data["spatial_ref"] = xr.Variable((), np.int32(0), {
        "crs_wkt": grid.crs_wkt,
        "GeoTransform": " ".join(repr(float(g)) for g in grid.gdal_transform)})
    coords = {"variant": np.array(variants, dtype=object),
              "member": np.arange(nm, dtype=np.int64),
              "parameter": np.array(design.keys, dtype=object),
              "time": ("time", np.asarray(times, dtype=float), {"units": "year",
                                                              "axis": "T"}),
              "y": ("y", grid.y, {"units": "m", "axis": "Y"}),
              "x": ("x", grid.x, {"units": "m", "axis": "X"})}
    return xr.Dataset(data, coords=coords, attrs=attrs)


class MemberStore:
    """Write access to a member store (one writer: the process running the ensemble).

    Use :meth:`create` for a new store and :meth:`open` for an existing one.
    """

    def __init__(self, path: Path, group) -> None:
        self.path = Path(path)
        self._g = group
        self.variants = [str(v) for v in group.attrs["variants"]]
        self.members = int(group["status"].shape[1])

    @classmethod
    def create(cls, path: str | Path, *, grid, variants: list[str], design, times,
               attrs: dict) -> MemberStore:
        """Create the store with every variable and no member yet (written atomically).

        Parameters
        ----------
        path : str or pathlib.Path
            The ``.zarr`` folder to create (must not exist).
        grid : Grid
            The grid of every member.
        variants : list of str
            Variant names (the ``variant`` dimension).
        design : Design
            The drawn values and seeds (:func:`preyscape.ensemble.design.plan_design`).
        times : numpy.ndarray
            Snapshot times, years.
        attrs : dict
            Global attributes (JSON values); ``attrs["plan"]`` identifies the
            settings, so a rerun can check it continues the same ensemble.
        """
        import os
        import shutil

        import zarr

        path = Path(path)
        tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
        shutil.rmtree(tmp, ignore_errors=True)
        ds = _skeleton(grid, variants, design, times, {**attrs, "variants": list(variants)})
        ds.to_zarr(tmp, mode="w-", compute=False, zarr_format=3, consolidated=False)
        # the fixed variables (values, seeds, mask, coordinates) are written by to_zarr;
        # member variables stay empty until their member is stored
        os.replace(tmp, path)
        return cls(path, zarr.open_group(path, mode="r+", zarr_format=3))

    @classmethod
    def open(cls, path: str | Path) -> MemberStore:
        """Open an existing store for writing more members."""
        import zarr

        try:
            g = zarr.open_group(Path(path), mode="r+", zarr_format=3)
            store = cls(path, g)
        except (FileNotFoundError, KeyError, ValueError) as exc:
            raise FileProblem(f"not a member store ({exc})", str(path)) from None
        missing = [f"{sp}_{m}" for sp in SPECIES for m in _MAPS if f"{sp}_{m}" not in g]
        if missing:  # a store of an earlier version (before the timing margin)
            raise FileProblem(f"this member store lacks {', '.join(missing)} (written by an "
                              "earlier preyscape); pass --overwrite to run the ensemble "
                              "again", str(path))
        return store

    @property
    def attrs(self) -> dict:
        """The store's global attributes."""
        return dict(self._g.attrs)

    def status(self) -> np.ndarray:
        """``(variant, member)`` status codes (:data:`STATUS`)."""
        return np.asarray(self._g["status"][...])

    def todo(self) -> list[tuple[str, int]]:
        """``(variant, member)`` pairs without a status, in order."""
        st = self.status()
        return [(v, m) for i, v in enumerate(self.variants) for m in range(self.members)
                if st[i, m] == 0]

    def write(self, result) -> None:
        """Store one member's summaries (:class:`~preyscape.ensemble.members.MemberResult`).

        Every chunk of the member is written before its status, so the member
        is either complete or absent for readers.
        """
        v = self.variants.index(result.variant)
        m = int(result.index)
        for name, a in result.maps.items():
            self._g[name][v, m] = a
        for sp, t in result.totals.items():
            self._g[f"{sp}_total"][v, m] = np.asarray(t, dtype=np.float64)
        self._g["step"][v, m] = float(result.dt)
        self._g["status"][v, m] = 1

    def fail(self, failure) -> None:
        """Mark a member as failed (:class:`~preyscape.ensemble.members.MemberFailure`)."""
        v = self.variants.index(failure.variant)
        self._g["status"][v, int(failure.index)] = 2


def open_members(path: str | Path):
    """Open a member store lazily (every variable a dask array).

    Returns
    -------
    xarray.Dataset
        Dimensions ``variant``, ``member``, ``parameter``, ``time``, ``y``,
        ``x``; take a member's values only where ``status == 1``.

    Raises
    ------
    FileProblem
        If ``path`` is not a member store.
    """
    import xarray as xr

    path = Path(path)
    if not (path / "zarr.json").is_file():
        raise FileProblem("not a member store (no zarr.json); give the members.zarr folder "
                          "of an ensemble", str(path))
    ds = xr.open_zarr(path, consolidated=False, zarr_format=3, chunks={})
    ds.attrs = {k: (json.loads(v) if isinstance(v, str) and v[:1] in "[{" else v)
                for k, v in ds.attrs.items()}
    return ds
