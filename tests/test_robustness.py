"""Robustness of the command line: malformed inputs, kills, resume.

One table of malformed inputs (scenario files, rasters, GeoJSON, variants,
output paths, damaged run folders, analysis options): every case must end
with exit status 2, one message on standard error that names the file, key,
option or folder, no traceback, and nothing left on disk. Then kill tests:
runs stopped by SIGINT, SIGTERM and SIGKILL at several points (in
subprocesses), including during the final swap of ``--overwrite``, leave
either the old result or the complete new one, and nothing else once the
next run has tidied up. Finally resume through the command line: an
interrupted run continued with ``--resume`` gives a ``results.nc`` whose
every variable is bitwise the uninterrupted run's.

All checks are design requirements (issue "nothing lost, nothing
half-written, nothing silently wrong"), not published values.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from conftest import (
    BASE,
    DX,
    SHAPE,
    X0,
    Y0,
    apply_overrides,
    habitat_array,
    to_toml,
    utm_grid,
    write_habitat,
)

from preyscape.cli import main
from preyscape.landscape.grid import Grid

CRS_MEMBER = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}


# ---------------------------------------------------------------------------
# shared run folders
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def env(tmp_path_factory) -> dict[str, Path]:
    """A finished run folder, and one on a coarser grid, shared by the table."""
    from preyscape.runfolder import simulate

    folder = tmp_path_factory.mktemp("robust_env")
    write_habitat(folder / "habitat.tif")
    (folder / "scenario.toml").write_text(to_toml(BASE))
    coarse = apply_overrides(BASE, {"landscape.cell_size": 200.0,
                                    "start.releases.0.radius": 300.0})
    (folder / "coarse.toml").write_text(to_toml(coarse))
    good = simulate(folder / "scenario.toml", folder / "good", maps=False, progress=False)
    other = simulate(folder / "coarse.toml", folder / "coarse", maps=False, progress=False)
    return {"good": good, "coarse": other}


# ---------------------------------------------------------------------------
# building blocks of the cases: each returns (argv, {placeholder: path})
# ---------------------------------------------------------------------------
def geojson_doc(*geometries: dict, crs: dict | None = CRS_MEMBER, props=None) -> dict:
    doc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": dict(props or {}), "geometry": g}
        for g in geometries]}
    if crs is not None:
        doc["crs"] = crs
    return doc


def box(r0: int, r1: int, c0: int, c1: int) -> dict:
    """A polygon over rows r0..r1-1, cols c0..c1-1 of the test grid."""
    xa, xb = X0 + c0 * DX, X0 + c1 * DX
    ya, yb = Y0 - r0 * DX, Y0 - r1 * DX
    return {"type": "Polygon", "coordinates": [[[xa, ya], [xb, ya], [xb, yb], [xa, yb],
                                                [xa, ya]]]}


def east_line() -> dict:
    y = Y0 - 12.5 * DX
    return {"type": "LineString", "coordinates": [[X0 + 5 * DX, y], [X0 + 25 * DX, y]]}


REFUGE = {"name": "fen refuge", "kind": "refuge", "geometry": "refuge.geojson",
          "protected_fraction": 0.5}


def put(w: Path, name: str, content) -> Path:
    """Write ``content`` (dict: JSON; bytes; str; callable(path)) to ``w/name``."""
    p = w / name
    if callable(content):
        content(p)
    elif isinstance(content, dict):
        p.write_text(json.dumps(content))
    elif isinstance(content, bytes):
        p.write_bytes(content)
    else:
        p.write_text(content)
    return p


def run_scenario(overrides: dict | None = None, *, text: str | bytes | None = None,
                 files: dict | None = None, argv: tuple = (), command: str = "run"):
    """A case that writes a scenario (and files beside it) and runs ``command`` on it."""
    def make(w: Path, env) -> tuple[list[str], dict]:
        write_habitat(w / "habitat.tif")
        for name, content in (files or {}).items():
            put(w, name, content)
        sc = w / "scenario.toml"
        if text is not None:
            put(w, "scenario.toml", text)
        else:
            sc.write_text(to_toml(apply_overrides(BASE, overrides or {})))
        out = w / "out"
        base = ["check", str(sc)] if command == "check" else [
            "run", str(sc), "--out", str(out), "--quiet"]
        return base + list(argv), {"scenario": sc, "out": out, "w": w}
    return make


def truncated_tif(p: Path) -> None:
    write_habitat(p)
    p.write_bytes(p.read_bytes()[:400])


def degree_tif(p: Path) -> None:
    from rasterio.crs import CRS

    write_habitat(p, habitat_array(), Grid(SHAPE, 14.0, 50.0, 0.001, 0.001,
                                           crs_wkt=CRS.from_epsg(4326).to_wkt()))


def feet_tif(p: Path) -> None:
    from rasterio.crs import CRS

    write_habitat(p, habitat_array(), Grid(SHAPE, 6e6, 2e6, 300.0, 300.0,
                                           crs_wkt=CRS.from_epsg(2227).to_wkt()))


def crsless_tif(p: Path) -> None:
    write_habitat(p, habitat_array(), Grid(SHAPE, X0, Y0, DX, DX, crs_wkt=""))


def rotated_tif(p: Path) -> None:
    import rasterio
    from affine import Affine
    from rasterio.crs import CRS

    with rasterio.open(p, "w", driver="GTiff", width=SHAPE[1], height=SHAPE[0], count=1,
                       dtype="uint8", crs=CRS.from_epsg(32633), nodata=0,
                       transform=Affine(DX, 20.0, X0, 20.0, -DX, Y0)) as dst:
        dst.write(habitat_array(), 1)


def coded_tif(code: int) -> Callable[[Path], None]:
    def write(p: Path) -> None:
        a = habitat_array()
        a[20:22, 3:6] = code
        write_habitat(p, a)
    return write


def nodata_tif(p: Path) -> None:
    write_habitat(p, np.zeros(SHAPE, dtype=np.uint8))


def density_tif(value: float) -> Callable[[Path], None]:
    def write(p: Path) -> None:
        from preyscape.landscape.io import write_geotiff

        write_geotiff(p, utm_grid(), np.full(SHAPE, value, dtype=np.float32))
    return write


def damaged(mutate: Callable[[Path], None], command: str = "hotspots", *,
            argv: tuple = (), where: str = "run"):
    """A case that copies the shared good run, damages it and runs ``command`` on it."""
    def make(w: Path, env) -> tuple[list[str], dict]:
        run = w / "run"
        shutil.copytree(env["good"], run)
        mutate(run)
        good = w / "good"
        shutil.copytree(env["good"], good)
        out = w / "out"
        if command == "compare":
            args = ["compare", str(good), str(run)] if where == "run" else [
                "compare", str(run), str(good)]
        elif command == "report":
            args = ["report", str(run), "--no-animation"]
        elif command == "effects-without":
            args = ["effects", str(good), "--without", str(run)]
        else:
            args = [command, str(run)]
        args += ["--out", str(out.with_suffix(".html") if command == "report" else out)]
        return args + list(argv), {"run": run, "out": out, "w": w}
    return make


def analysis(command: str, *argv: str, files: dict | None = None, out: str | None = None,
             setup: Callable[[Path], None] | None = None):
    """A case that runs ``command`` on a copy of the good run with the options given."""
    def make(w: Path, env) -> tuple[list[str], dict]:
        run = w / "run"
        shutil.copytree(env["good"], run)
        for name, content in (files or {}).items():
            put(w, name, content)
        if setup is not None:
            setup(w)
        o = w / (out or "out")
        runs = [str(run)] if command != "compare" else [str(run), str(run)]
        return ([command, *runs, "--out", str(o), *(a.format(w=w) for a in argv)],
                {"run": run, "out": o, "w": w})
    return make


def mismatched_grids(w: Path, env) -> tuple[list[str], dict]:
    a, b = w / "fine", w / "coarse"
    shutil.copytree(env["good"], a)
    shutil.copytree(env["coarse"], b)
    return ["compare", str(a), str(b), "--out", str(w / "cmp")], {"a": a, "b": b, "w": w}


def edit_json(name: str, change: Callable[[dict], object]) -> Callable[[Path], None]:
    def mutate(run: Path) -> None:
        p = run / name
        d = json.loads(p.read_text())
        change(d)
        p.write_text(json.dumps(d))
    return mutate


def write_to(name: str, data: bytes) -> Callable[[Path], None]:
    return lambda run: (run / name).write_bytes(data)


def truncate(name: str, keep: float) -> Callable[[Path], None]:
    def mutate(run: Path) -> None:
        b = (run / name).read_bytes()
        (run / name).write_bytes(b[:int(len(b) * keep)])
    return mutate


def zero_middle(run: Path) -> None:
    """Zero a stretch of bytes inside the last snapshot's compressed chunks."""
    p = run / "results.nc"
    b = bytearray(p.read_bytes())
    n = len(b)
    b[n // 2:n // 2 + 2000] = bytes(2000)
    p.write_bytes(bytes(b))


def drop_variable(var: str) -> Callable[[Path], None]:
    def mutate(run: Path) -> None:
        import xarray as xr

        with xr.open_dataset(run / "results.nc", decode_times=False) as ds:
            kept = ds.drop_vars([var]).load()
        kept.to_netcdf(run / "results.nc")
    return mutate


def no_snapshots(run: Path) -> None:
    import xarray as xr

    with xr.open_dataset(run / "results.nc", decode_times=False) as ds:
        empty = ds.isel(time=slice(0, 0)).load()
    empty.to_netcdf(run / "results.nc")


def add_record(key: str, record: dict) -> Callable[[Path], None]:
    return edit_json("run.json", lambda d: d.setdefault(key, []).append(record))


def file_at(name: str) -> Callable[[Path], None]:
    return lambda w: (w / name).write_text("a file, not a folder")


def unwritable(w: Path) -> Path:
    """A folder no one may write to (a read-only system folder when running as root)."""
    if os.geteuid() == 0:
        return Path("/sys/preyscape-robustness")
    ro = w / "locked"
    ro.mkdir()
    ro.chmod(0o555)
    return ro


def run_into(target: Callable[[Path], Path], *argv: str, prepare=None):
    """A case that runs the base scenario with ``--out`` at ``target(w)``."""
    def make(w: Path, env) -> tuple[list[str], dict]:
        write_habitat(w / "habitat.tif")
        sc = w / "scenario.toml"
        sc.write_text(to_toml(BASE))
        if prepare is not None:
            prepare(w)
        out = target(w)
        return (["run", str(sc), "--out", str(out), "--quiet", *argv],
                {"scenario": sc, "out": out, "w": w})
    return make


def in_cwd(w: Path) -> Path:
    os.chdir(w)
    return Path(".")


def existing_folder(w: Path) -> None:
    (w / "out").mkdir()
    (w / "out" / "keep.txt").write_text("older work")


VARIANTS = {
    "measures": [dict(REFUGE), {"name": "north fence", "kind": "fence",
                                "geometry": "fence.geojson", "baseline": False,
                                "permeability": {"prey": 1.0, "predator": 0.0}}],
    "variants": [{"name": "fenced", "add": ["north fence"]}],
}
VARIANT_FILES = {"refuge.geojson": geojson_doc(box(3, 9, 2, 8)),
                 "fence.geojson": geojson_doc(east_line())}
TRANSECTS = {"t.geojson": geojson_doc(east_line(), props={"name": "east"})}


# ---------------------------------------------------------------------------
# the table: id, case, words the message must contain ({name}: a path of the case)
# ---------------------------------------------------------------------------
TABLE = [
    # --- TOML syntax and the scenario file itself
    ("toml-unclosed-table", run_scenario(text="[prey\ngrowth = 1\n"),
     ["{scenario}", "not valid TOML"]),
    ("toml-duplicate-key", run_scenario(text="[run]\nyears = 1.0\nyears = 2.0\n"),
     ["{scenario}", "not valid TOML"]),
    ("toml-not-utf8", run_scenario(text=b"\xff\xfe[run]\n"), ["{scenario}", "not valid TOML"]),
    ("toml-empty-file", run_scenario(text=""), ["{scenario}", "landscape", "missing"]),
    ("scenario-missing", lambda w, env: (["run", str(w / "none.toml"), "--out",
                                           str(w / "out")], {"w": w}), ["none.toml"]),
    ("scenario-is-a-folder", lambda w, env: (["check", str(w)], {"w": w}),
     ["{w}", "cannot read scenario file"]),
    # --- keys at every level
    ("key-top-level", run_scenario({"titel": "x"}), ["{scenario}", "titel", "'title'"]),
    ("key-landscape", run_scenario({"landscape.habitaat": "habitat.tif"}),
     ["landscape.habitaat"]),
    ("key-prey", run_scenario({"prey.grwoth": 3.7}), ["prey.grwoth", "did you mean"]),
    ("key-predator", run_scenario({"predator.mortallity": 1.0}), ["predator.mortallity"]),
    ("key-interaction", run_scenario({"interaction.atack_rate": 1.0}),
     ["interaction.atack_rate"]),
    ("key-start", run_scenario({"start.prey_dens": 1.0}), ["start.prey_dens"]),
    ("key-run", run_scenario({"run.yeras": 1.0}), ["run.yeras", "'years'"]),
    ("key-class-row", run_scenario({"landscape.classes.1.prey_capacty": 1.0}),
     ["landscape.classes[1].prey_capacty"]),
    ("key-release", run_scenario({"start.releases.0.radiuss": 1.0}),
     ["start.releases[0].radiuss"]),
    ("key-measure", run_scenario({"measures": [{**REFUGE, "protected": 0.5}]},
                                 files=VARIANT_FILES), ["measures[0].protected"]),
    ("key-of-other-kind", run_scenario({"measures": [{**REFUGE, "gaps": []}]},
                                       files=VARIANT_FILES),
     ["measures[0]", "'gaps' does not apply"]),
    ("key-analysis", run_scenario({"analysis.presense": 1.0}), ["analysis.presense"]),
    ("key-missing-section", run_scenario(text=to_toml(
        {k: v for k, v in BASE.items() if k != "run"})), ["run", "missing required key"]),
    ("key-missing-value", run_scenario(text=to_toml({**BASE, "prey": {
        k: v for k, v in BASE["prey"].items() if k != "growth"}})),
     ["prey.growth", "missing required key"]),
    ("key-variant-at-top", run_scenario({"variant": "x"}), ["unknown key 'variant'"]),
    # --- types
    ("type-quoted-number", run_scenario({"prey.growth": "3.7"}), ["prey.growth"]),
    ("type-bool-for-number", run_scenario({"prey.growth": True}), ["prey.growth"]),
    ("type-list-for-number", run_scenario({"run.years": [1.0, 2.0]}), ["run.years"]),
    ("type-bool-yes", run_scenario({"measures": [{**REFUGE, "baseline": "yes"}]},
                                   files=VARIANT_FILES), ["measures[0].baseline", "boolean"]),
    ("type-bool-one", run_scenario({"measures": [{**REFUGE, "closed_to_predators": 1}]},
                                   files=VARIANT_FILES),
     ["measures[0].closed_to_predators", "boolean"]),
    ("type-float-seed", run_scenario({"run.seed": 1.5}), ["run.seed"]),
    ("type-bad-choice", run_scenario({"landscape.values": "class"}), ["landscape.values"]),
    ("type-movement-choice", run_scenario({"prey.movement": "fick"}), ["prey.movement"]),
    ("type-string-code", run_scenario({"landscape.classes.0.code": "1"}),
     ["landscape.classes[0].code"]),
    ("type-section-as-text", run_scenario(text='landscape = "habitat.tif"\n' + to_toml(
        {k: v for k, v in BASE.items() if k != "landscape"})), ["landscape"]),
    # --- ranges and limits
    ("range-negative-rate", run_scenario({"predator.mortality": -0.5}),
     ["predator.mortality"]),
    ("range-float32-capacity", run_scenario({"prey.capacity": 1e300}),
     ["prey.capacity", "1e+30"]),
    ("range-tiny-growth", run_scenario({"prey.growth": 1e-40}), ["prey.growth", "1e-30"]),
    ("range-nan", run_scenario(text=to_toml(BASE).replace("growth = 3.7", "growth = nan")),
     ["prey.growth"]),
    ("range-inf-years", run_scenario(text=to_toml(BASE).replace("years = 0.5", "years = inf")),
     ["run.years"]),
    ("range-save-after-end", run_scenario({"run.save_every": 2.0}), ["run", "save_every"]),
    ("range-step-misfit", run_scenario({"run.step": 0.07}), ["run.step", "divide"]),
    ("range-noise", run_scenario({"start.noise": 1.5}), ["start.noise"]),
    ("range-fraction", run_scenario({"measures": [{**REFUGE, "protected_fraction": 1.5}]},
                                    files=VARIANT_FILES), ["measures[0].protected_fraction"]),
    ("range-negative-seed", run_scenario({"run.seed": -1}), ["run.seed"]),
    ("range-start-density", run_scenario({"start.prey": "uniform",
                                          "start.prey_density": 1e31}),
     ["start.prey_density", "1e+30"]),
    ("range-product-overflows", run_scenario({"prey.capacity": 1e30,
                                              "landscape.classes.1.prey_capacity": 1e30}),
     ["{scenario}", "prey.capacity: this value times its habitat multipliers", "32-bit"]),
    ("limit-steps-fixed", run_scenario({"run.step": 1e-7}),
     ["{scenario}", "run.step", "steps", "--allow-large"]),
    ("limit-steps-rate", run_scenario({"prey.growth": 1e6}),
     ["{scenario}", "prey.growth", "steps", "--allow-large"]),
    ("limit-steps-explicit", run_scenario({"run.scheme": "explicit",
                                           "predator.diffusivity": 1e6}),
     ["{scenario}", "explicit", "substeps", "--allow-large"]),
    ("limit-memory", run_scenario({"landscape.cell_size": 0.01}),
     ["{scenario}", "landscape.cell_size", "MB", "cell size of", "--allow-large"]),
    ("limit-memory-check", run_scenario({"landscape.cell_size": 0.01}, command="check"),
     ["{scenario}", "landscape.cell_size", "MB"]),
    ("blow-up-lotka-volterra", run_scenario({
        "interaction.form": "lotka-volterra", "interaction.handling_time": 0.0,
        "prey.growth": 120.0, "start.prey": "uniform", "start.prey_density": 1e20,
        "start.releases": [], "run.years": 0.5, "run.save_every": 0.5}),
     ["{scenario}", "stopped being finite", "lotka-volterra"]),
    # --- rasters
    ("raster-missing", run_scenario({"landscape.habitat": "gone.tif"}),
     ["landscape.habitat", "gone.tif"]),
    ("raster-not-a-raster", run_scenario({"landscape.habitat": "text.tif"},
                                         files={"text.tif": "not a raster"}),
     ["landscape.habitat", "text.tif"]),
    ("raster-truncated", run_scenario({"landscape.habitat": "cut.tif"},
                                      files={"cut.tif": truncated_tif}),
     ["landscape.habitat", "cut.tif"]),
    ("raster-empty-file", run_scenario({"landscape.habitat": "empty.tif"},
                                       files={"empty.tif": b""}),
     ["landscape.habitat", "empty.tif"]),
    ("raster-is-a-folder", run_scenario({"landscape.habitat": "sub"},
                                        files={"sub": lambda p: p.mkdir()}),
     ["landscape.habitat", "'sub' is a folder"]),
    ("raster-code-without-row", run_scenario({"landscape.habitat": "seven.tif"},
                                             files={"seven.tif": coded_tif(7)}),
     ["landscape.classes", "code 7"]),
    ("raster-suitability-range", run_scenario({"landscape.values": "suitability",
                                               "landscape.classes": []}),
     ["landscape.habitat", "suitability"]),
    ("raster-all-nodata", run_scenario({"landscape.habitat": "none.tif"},
                                       files={"none.tif": nodata_tif}),
     ["landscape.habitat", "no cells with data"]),
    ("raster-negative-start", run_scenario({"start.prey": "raster",
                                            "start.prey_raster": "neg.tif"},
                                           files={"neg.tif": density_tif(-5.0)}),
     ["start.prey_raster", "negative"]),
    ("raster-start-truncated", run_scenario({"start.prey": "raster",
                                             "start.prey_raster": "cut.tif"},
                                            files={"cut.tif": truncated_tif}),
     ["start.prey_raster", "cut.tif"]),
    ("raster-start-overflows", run_scenario({"start.prey": "raster",
                                             "start.prey_raster": "huge.tif"},
                                            files={"huge.tif": density_tif(3e38)}),
     ["{scenario}", "start", "per km²"]),
    # --- CRS problems
    ("crs-degrees", run_scenario({"landscape.habitat": "deg.tif"},
                                 files={"deg.tif": degree_tif}),
     ["landscape.habitat", "EPSG:4326"]),
    ("crs-feet", run_scenario({"landscape.habitat": "ft.tif"}, files={"ft.tif": feet_tif}),
     ["landscape.habitat", "ft.tif"]),
    ("crs-none", run_scenario({"landscape.habitat": "nocrs.tif"},
                              files={"nocrs.tif": crsless_tif}),
     ["landscape.habitat", "CRS"]),
    ("crs-rotated", run_scenario({"landscape.habitat": "rot.tif"},
                                 files={"rot.tif": rotated_tif}),
     ["landscape.habitat", "rot"]),
    ("crs-unknown-member", run_scenario({"measures": [REFUGE]}, files={
        "refuge.geojson": geojson_doc(box(3, 9, 2, 8), crs={
            "type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::999999"}})}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("crs-key-with-raster", run_scenario({"measures": [
        {"name": "r", "kind": "refuge", "raster": "habitat.tif", "crs": "EPSG:32633",
         "protected_fraction": 0.5}]}), ["measures[0]", "'crs'"]),
    # --- GeoJSON problems
    ("geojson-missing", run_scenario({"measures": [REFUGE]}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("geojson-not-json", run_scenario({"measures": [REFUGE]},
                                      files={"refuge.geojson": "{ not json"}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("geojson-no-features", run_scenario({"measures": [REFUGE]},
                                         files={"refuge.geojson": geojson_doc()}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("geojson-outside", run_scenario({"measures": [REFUGE]}, files={
        "refuge.geojson": geojson_doc({"type": "Polygon", "coordinates": [[
            [0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]})}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("geojson-line-for-refuge", run_scenario({"measures": [REFUGE]}, files={
        "refuge.geojson": geojson_doc({"type": "Point", "coordinates": [X0 + 50, Y0 - 50]})}),
     ["measures[0].geometry", "refuge.geojson"]),
    ("geojson-transects-polygons", analysis("waves", "--transects", "{w}/t.geojson",
                                            files={"t.geojson": geojson_doc(box(1, 5, 1, 5))}),
     ["--transects", "t.geojson"]),
    ("geojson-transects-missing", analysis("waves", "--transects", "{w}/none.geojson"),
     ["--transects", "none.geojson"]),
    ("geojson-zones-not-json", analysis("compare", "--zones", "{w}/z.geojson",
                                        files={"z.geojson": "not json"}),
     ["--zones", "z.geojson"]),
    ("geojson-targets-lines", analysis("effects", "--targets", "{w}/t.geojson",
                                       files=TRANSECTS), ["--targets", "t.geojson"]),
    # --- variants
    ("variant-unknown-measure", run_scenario({**VARIANTS, "variants": [
        {"name": "fenced", "add": ["north fense"]}]}, files=VARIANT_FILES),
     ["variants[0].add", "did you mean 'north fence'"]),
    ("variant-changes-grid", run_scenario({**VARIANTS, "variants": [
        {"name": "fine", "set": {"landscape.cell_size": 50.0}}]}, files=VARIANT_FILES),
     ["variants[0].set", "landscape.cell_size"]),
    ("variant-bad-override", run_scenario({**VARIANTS, "variants": [
        {"name": "fast", "set": {"prey.growth": -1.0}}]}, files=VARIANT_FILES),
     ["variant 'fast'", "prey.growth"]),
    ("variant-unknown-name", run_scenario(VARIANTS, files=VARIANT_FILES,
                                          argv=("--variant", "fencd")),
     ["{scenario}", "fencd", "did you mean 'fenced'"]),
    ("variant-duplicate", run_scenario({**VARIANTS, "variants": [
        {"name": "a", "add": ["north fence"]}, {"name": "a", "add": ["north fence"]}]},
        files=VARIANT_FILES), ["variant name 'a'"]),
    ("variant-named-baseline", run_scenario({**VARIANTS, "variants": [
        {"name": "baseline", "add": ["north fence"]}]}, files=VARIANT_FILES),
     ["variants[0].name", "baseline"]),
    ("variant-fence-outside", run_scenario(VARIANTS, files={
        **VARIANT_FILES, "fence.geojson": geojson_doc({"type": "LineString", "coordinates": [
            [0, 0], [10, 10]]})}), ["measures[1].geometry", "fence.geojson"]),
    # --- output paths
    ("out-under-a-file", run_into(lambda w: w / "f" / "out", prepare=file_at("f")),
     ["{out}", "is a file"]),
    ("out-is-a-file", run_into(lambda w: w / "f", prepare=file_at("f")),
     ["{out}", "not a folder"]),
    ("out-is-a-file-overwrite", run_into(lambda w: w / "f", "--overwrite",
                                         prepare=file_at("f")),
     ["{out}", "not a folder"]),
    ("out-exists", run_into(lambda w: w / "out", prepare=existing_folder),
     ["{out}", "--overwrite"]),
    ("out-unwritable", run_into(lambda w: unwritable(w) / "out"), ["{out}", "not writable"]),
    ("out-is-current-folder", run_into(in_cwd, "--overwrite"),
     ["current folder", "--out"]),
    ("out-holds-the-inputs", run_into(lambda w: w, "--overwrite"), ["input", "--out"]),
    ("out-variants-under-a-file", run_scenario(VARIANTS, files={**VARIANT_FILES, "f": "x"},
                                               argv=("--out", "{w}/f/runs")),
     ["is a file"]),
    ("analysis-out-is-a-file", analysis("hotspots", out="f.txt", files={"f.txt": "x"}),
     ["f.txt", "not a folder"]),
    ("analysis-out-is-its-run", analysis("hotspots", "--overwrite", out="run"),
     ["{run}", "--out"]),
    ("analysis-out-unwritable", lambda w, env: (analysis("waves")(w, env)[0][:2] + [
        "--out", str(unwritable(w) / "waves")], {"w": w}), ["not writable"]),
    ("report-out-is-a-folder", analysis("report", "--overwrite", out="folder",
                                        setup=lambda w: (w / "folder").mkdir()),
     ["folder", "is a folder"]),
    ("report-out-under-a-file", analysis("report", out="f/r.html", files={"f": "x"}),
     ["is a file"]),
    # --- damaged or foreign run folders
    ("run-json-invalid", damaged(write_to("run.json", b'{"broken')),
     ["{run}", "run.json", "not valid JSON"]),
    ("run-json-list", damaged(write_to("run.json", b"[1, 2]")), ["{run}", "JSON object"]),
    ("run-json-wrong-type", damaged(edit_json("run.json", lambda d: d.update(analysis=[1])),
                                    "waves"), ["{run}", "'analysis'"]),
    ("run-json-no-years", damaged(edit_json("run.json", lambda d: d.pop("years")), "report"),
     ["{run}", "'years'"]),
    ("run-json-bad-measure", damaged(add_record("measures", {"name": "x"}), "effects"),
     ["{run}", "measures[0]"]),
    ("run-json-stored-setting", damaged(edit_json("run.json", lambda d: d["analysis"].update(
        significance=5)), "hotspots"), ["{run}", "analysis.significance"]),
    ("results-truncated", damaged(truncate("results.nc", 0.5)), ["{run}", "results.nc"]),
    ("results-truncated-end", damaged(truncate("results.nc", 0.97), "compare"),
     ["{run}", "results.nc"]),
    ("results-text", damaged(write_to("results.nc", b"hello"), "waves"),
     ["{run}", "not a NetCDF file"]),
    ("results-empty", damaged(write_to("results.nc", b""), "report"),
     ["{run}", "results.nc is empty"]),
    ("results-zeroed-chunk", damaged(zero_middle, "hotspots"), ["{run}", "results.nc"]),
    ("results-no-variable", damaged(drop_variable("predator"), "effects"),
     ["{run}", "'predator'"]),
    ("results-no-totals", damaged(drop_variable("prey_total"), "compare"),
     ["{run}", "'prey_total'"]),
    ("results-no-snapshots", damaged(no_snapshots, "report"), ["{run}", "no snapshots"]),
    ("results-is-a-folder", damaged(lambda r: ((r / "results.nc").unlink(),
                                               (r / "results.nc").mkdir())),
     ["{run}", "not a finished run folder"]),
    ("measure-file-missing", damaged(add_record("measures", {
        "name": "fen", "kind": "refuge", "cells_file": "measures/fen.tif",
        "protected_fraction": 0.5}), "effects"), ["{run}", "measures/fen.tif"]),
    ("target-file-missing", damaged(add_record("targets", {
        "name": "t", "cells_file": "targets/t.tif"}), "effects"),
     ["{run}", "targets/t.tif"]),
    ("operators-damaged", damaged(lambda r: (
        (r / "operators" / "epoch_0.npz").write_bytes(b"PK\x03\x04 broken"),
        put(r.parent, "t.geojson", TRANSECTS["t.geojson"])), "effects",
        argv=("--transects", "{w}/t.geojson")), ["{run}", "operators", "is damaged"]),
    ("not-a-run-folder", damaged(lambda r: [p.unlink() for p in (r / "run.json",
                                                                  r / "results.nc")]),
     ["{run}", "not a finished run folder"]),
    ("run-is-a-file", lambda w, env: (
        ["hotspots", str(put(w, "r.txt", "x")), "--out", str(w / "o")], {"w": w}),
     ["r.txt", "is a file"]),
    ("compare-damaged-reference", damaged(truncate("results.nc", 0.5), "compare",
                                          where="reference"), ["{run}"]),
    ("effects-damaged-without", damaged(write_to("run.json", b"{"), "effects-without"),
     ["{run}", "run.json"]),
    ("compare-different-grids", mismatched_grids, ["{a}", "{b}", "cannot be compared"]),
    # --- analysis options
    ("option-distance-huge", analysis("hotspots", "--distance", "1e9"),
     ["--distance", "larger than the landscape"]),
    ("option-distance-negative", analysis("hotspots", "--distance", "-5"), ["--distance"]),
    ("option-fdr", analysis("hotspots", "--fdr", "1.5"), ["--fdr", "between 0 and 1"]),
    ("option-prey-threshold", analysis("waves", "--prey-threshold", "-1"),
     ["--prey-threshold"]),
    ("option-change-threshold", analysis("compare", "--threshold", "0"), ["--threshold"]),
    ("option-presence-nan", analysis("compare", "--presence", "nan"), ["--presence"]),
]


def listing(root: Path) -> list[tuple[str, int]]:
    """Every path under ``root`` (hidden ones too) with its size."""
    return sorted((str(p.relative_to(root)), p.stat().st_size if p.is_file() else -1)
                  for p in root.rglob("*"))


@pytest.mark.parametrize("make,needles", [pytest.param(m, n, id=i) for i, m, n in TABLE])
def test_malformed_input_ends_cleanly(make, needles, env, tmp_path, capsys, monkeypatch):
    # design requirement: exit 2, one message naming the file/key/option/folder, no
    # traceback, nothing left on disk
    monkeypatch.chdir(tmp_path)
    w = tmp_path / "w"
    w.mkdir()
    argv, paths = make(w, env)
    argv = [a.format(w=w) for a in argv]
    before = listing(tmp_path)
    capsys.readouterr()
    try:
        status = main(argv)
    finally:
        for p in w.rglob("*"):  # let pytest remove what a case locked
            if p.is_dir() and not os.access(p, os.W_OK):
                p.chmod(0o755)
    err = capsys.readouterr().err
    if os.environ.get("SHOW_ERRORS"):
        with capsys.disabled():
            print("\n", err)
    assert status == 2, err
    assert "Traceback" not in err
    assert err.startswith("preyscape: error: ") and err.count("preyscape: error:") == 1, err
    for needle in needles:
        assert needle.format(**{k: str(v) for k, v in paths.items()}) in err, (needle, err)
    assert listing(tmp_path) == before


def test_table_is_large_enough():
    # design requirement: at least 60 malformed-input cases, with distinct ids
    assert len(TABLE) >= 60
    assert len({i for i, _, _ in TABLE}) == len(TABLE)


# ---------------------------------------------------------------------------
# kill tests: subprocesses stopped by a signal at chosen points
# ---------------------------------------------------------------------------
DRIVER = r'''
import os, signal, sys

point, signame, *argv = sys.argv[1:]
sig = getattr(signal, signame)
from preyscape import runfolder, store


def fire():
    os.kill(os.getpid(), sig)


def at(owner, name, n=1, before=False):
    real = getattr(owner, name)
    calls = [0]

    def wrapped(*a, **k):
        calls[0] += 1
        if before and calls[0] == n:
            fire()
        out = real(*a, **k)
        if not before and calls[0] == n:
            fire()
        return out

    setattr(owner, name, wrapped)


kind, _, n = point.partition(":")
n = int(n or 1)
if kind != "maps":  # maps take most of a tiny run's time; the tests look at results
    runfolder.draw_run_maps = lambda *a, **k: []
if kind == "checkpoint":  # after the n-th checkpoint is written
    at(store, "save_checkpoint", n)
elif kind == "snapshot":  # after the n-th snapshot is written, before its checkpoint
    at(store.ResultWriter, "write", n)
elif kind == "prepare":  # while the scenario is prepared, before any folder exists
    at(runfolder, "prepare", before=True)
elif kind == "maps":  # after the last step, while the maps are drawn
    at(runfolder, "draw_run_maps", before=True)
elif kind == "before-swap":  # the new run is complete, the old one not yet replaced
    at(store, "_exchange", before=True)
elif kind == "swap":  # right after the atomic exchange, before the old one is deleted
    at(store, "_exchange")
elif kind == "aside":  # no exchange: between renaming the old one aside and the new one in
    store._exchange = lambda a, b: False
    real = os.replace

    def replace(src, dst):
        real(src, dst)
        if ".replaced-" in str(dst):
            fire()

    os.replace = replace
from preyscape.cli import main

sys.exit(main(argv))
'''

KILL_RUN = {"run.years": 1.0}  # four save points of 0.25 yr: room to stop in between


@pytest.fixture
def no_maps(monkeypatch):
    """Runs in this process draw no maps (they take most of a tiny run's time)."""
    import preyscape.runfolder

    monkeypatch.setattr(preyscape.runfolder, "draw_run_maps", lambda *a, **k: [])


@pytest.fixture(scope="module")
def kill_env(tmp_path_factory) -> dict[str, Path]:
    """The shared kill scenario, an uninterrupted reference run of it, and the driver."""
    from preyscape.runfolder import simulate

    folder = tmp_path_factory.mktemp("robust_kill")
    write_habitat(folder / "habitat.tif")
    sc = folder / "scenario.toml"
    sc.write_text(to_toml(apply_overrides(BASE, KILL_RUN)))
    old = folder / "old.toml"  # a shorter run: the "old result" an --overwrite replaces
    old.write_text(to_toml(BASE))
    driver = folder / "driver.py"
    driver.write_text(DRIVER)
    ref = simulate(sc, folder / "reference", maps=False, progress=False)
    return {"folder": folder, "scenario": sc, "old": old, "driver": driver, "ref": ref}


def stop(env: dict, point: str, signame: str, *argv: str) -> subprocess.CompletedProcess:
    """Run ``preyscape`` in a subprocess that sends itself ``signame`` at ``point``."""
    return subprocess.run([sys.executable, str(env["driver"]), point, signame, *argv],
                          capture_output=True, text=True, timeout=600,
                          env={**os.environ, "PYTHONUNBUFFERED": "1"})


def hidden(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def assert_same_results(a: Path, b: Path) -> None:
    """Every variable of two results.nc files bitwise equal, and the same attributes."""
    import netCDF4

    with netCDF4.Dataset(a / "results.nc") as x, netCDF4.Dataset(b / "results.nc") as y:
        assert sorted(x.variables) == sorted(y.variables)
        for name in x.variables:
            u, v = x[name][...], y[name][...]
            assert u.dtype == v.dtype and u.shape == v.shape, name
            assert np.array_equal(np.ma.filled(u, np.nan), np.ma.filled(v, np.nan),
                                  equal_nan=True), name
            assert x[name].ncattrs() == y[name].ncattrs(), name
        skip = {"history"}  # when the run started
        assert ({k: x.getncattr(k) for k in x.ncattrs() if k not in skip}
                == {k: y.getncattr(k) for k in y.ncattrs() if k not in skip})


EXIT = {"SIGINT": 130, "SIGTERM": 143, "SIGKILL": -signal.SIGKILL}


@pytest.mark.parametrize("point,signame", [
    ("checkpoint:2", "SIGINT"), ("checkpoint:2", "SIGTERM"), ("checkpoint:2", "SIGKILL"),
    ("snapshot:4", "SIGKILL"), ("maps", "SIGINT")])
def test_stopped_run_is_kept_and_resumes_bitwise(kill_env, point, signame, tmp_path, capsys,
                                                 no_maps):
    # design requirement: an interrupted run keeps its partial folder with its checkpoint;
    # --resume continues it to results bitwise equal to an uninterrupted run's
    out = tmp_path / "runs" / "moor"
    proc = stop(kill_env, point, signame, "run", str(kill_env["scenario"]), "--out", str(out),
                "--quiet")
    assert proc.returncode == EXIT[signame], proc.stderr
    assert "Traceback" not in proc.stderr
    if signame != "SIGKILL":
        name = "Ctrl-C" if signame == "SIGINT" else "SIGTERM"
        assert proc.stderr.startswith(f"preyscape: interrupted ({name}): {out}: stopped at t = ")
        assert "continue with: preyscape run" in proc.stderr and "--resume" in proc.stderr
    assert not out.exists()
    kept = hidden(out.parent)
    assert len(kept) == 1 and kept[0].startswith(".moor.partial-")
    assert {"checkpoint.npz", "partial.json", "results.nc"} <= {
        p.name for p in (out.parent / kept[0]).iterdir()}
    # without --resume the kept run is neither lost nor overwritten
    assert main(["run", str(kill_env["scenario"]), "--out", str(out), "--quiet"]) == 2
    assert "--resume" in capsys.readouterr().err and hidden(out.parent) == kept
    assert main(["run", str(kill_env["scenario"]), "--out", str(out), "--quiet",
                 "--resume"]) == 0, capsys.readouterr().err
    assert hidden(out.parent) == []
    assert not (out / "partial.json").exists()
    assert_same_results(out, kill_env["ref"])
    info = json.loads((out / "run.json").read_text())
    ref = json.loads((kill_env["ref"] / "run.json").read_text())
    assert info["steps"] == ref["steps"] and info["resumed_from_step"] > 0
    assert info["positivity_clip_total"] == ref["positivity_clip_total"]


def test_stopped_before_any_save_point_leaves_nothing(kill_env, tmp_path, capsys, no_maps):
    # design requirement: nothing to resume, nothing left; a killed run's temporary folder
    # is removed by the next run into the same place
    out = tmp_path / "moor"
    proc = stop(kill_env, "prepare", "SIGTERM", "run", str(kill_env["scenario"]), "--out",
                str(out), "--quiet")
    assert proc.returncode == 143 and "Traceback" not in proc.stderr
    assert proc.stderr.startswith("preyscape: interrupted (SIGTERM): ")
    assert sorted(p.name for p in tmp_path.iterdir()) == []
    proc = stop(kill_env, "snapshot:1", "SIGKILL", "run", str(kill_env["scenario"]), "--out",
                str(out), "--quiet")
    assert proc.returncode == -signal.SIGKILL
    assert [p.startswith(".moor.partial-") for p in hidden(tmp_path)] == [True]
    assert main(["run", str(kill_env["old"]), "--out", str(out), "--quiet"]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["moor"]


def run_years(folder: Path) -> float:
    return json.loads((folder / "run.json").read_text())["years"]


@pytest.mark.parametrize("point,signame,after", [
    ("before-swap", "SIGKILL", "old"), ("swap", "SIGKILL", "new"), ("swap", "SIGTERM", "new"),
    ("aside", "SIGKILL", "old")])
def test_stopped_overwrite_leaves_old_or_new(kill_env, point, signame, after, tmp_path,
                                            capsys, no_maps):
    # design requirement: while --overwrite replaces a run folder, a stop leaves the old
    # folder or the complete new one, never a mix; the next run tidies what a kill left
    out = tmp_path / "moor"
    assert main(["run", str(kill_env["old"]), "--out", str(out), "--quiet"]) == 0
    old_files = listing(out)
    proc = stop(kill_env, point, signame, "run", str(kill_env["scenario"]), "--out", str(out),
                "--quiet", "--overwrite")
    assert proc.returncode == EXIT[signame], proc.stderr
    assert "Traceback" not in proc.stderr
    if point == "aside":  # renamed aside, not yet replaced: the next run puts it back
        from preyscape.store import remove_stale

        assert not out.exists()
        remove_stale(out)
    if after == "old":
        assert listing(out) == old_files and run_years(out) == 0.5
    else:
        assert run_years(out) == 1.0
        assert_same_results(out, kill_env["ref"])
    if signame == "SIGTERM":  # held until the swap was done: nothing else is left
        assert "the run had finished" in proc.stderr
        assert hidden(tmp_path) == []
    capsys.readouterr()
    assert main(["run", str(kill_env["old"]), "--out", str(out), "--quiet",
                 "--overwrite"]) == 0, capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["moor"]
    assert run_years(out) == 0.5


def test_stopped_variants_say_what_finished_and_resume_without_mixing(kill_env, tmp_path,
                                                                      capsys, no_maps):
    # design requirement: an interrupted run of variants says which finished; --resume
    # keeps those, continues the stopped one bitwise, runs the rest, and refuses to mix
    # variants made from different versions of the scenario
    from preyscape.runfolder import simulate
    from preyscape.scenario import load_scenario

    write_habitat(tmp_path / "habitat.tif")
    for name, doc in VARIANT_FILES.items():
        put(tmp_path, name, doc)
    data = apply_overrides(BASE, {**KILL_RUN, **VARIANTS, "variants": [
        {"name": "fenced", "add": ["north fence"]},
        {"name": "no-refuge", "remove": ["fen refuge"]}]})
    sc = tmp_path / "variants.toml"
    sc.write_text(to_toml(data))
    out = tmp_path / "runs"
    proc = stop(kill_env, "checkpoint:6", "SIGINT", "run", str(sc), "--out", str(out),
                "--quiet")  # four checkpoints per variant: the second variant is stopped
    assert proc.returncode == 130 and "Traceback" not in proc.stderr, proc.stderr
    assert "variants finished: baseline; stopped: fenced; not started: no-refuge" in proc.stderr
    assert "continue with: preyscape run" in proc.stderr
    names = sorted(p.name for p in out.iterdir())
    assert names[1:] == ["baseline"] and names[0].startswith(".fenced.partial-")
    finished = (out / "baseline" / "run.json").read_bytes()

    sc.write_text(to_toml(apply_overrides(data, {"prey.growth": 3.0})))
    assert main(["run", str(sc), "--out", str(out), "--quiet", "--resume"]) == 2
    err = capsys.readouterr().err
    assert f"{out / 'baseline'}: this run folder was made from another version" in err
    assert sorted(p.name for p in out.iterdir()) == names

    sc.write_text(to_toml(data))
    assert main(["run", str(sc), "--out", str(out), "--quiet", "--resume"]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["baseline", "fenced", "no-refuge"]
    assert (out / "baseline" / "run.json").read_bytes() == finished  # kept, not run again
    ref = simulate(load_scenario(sc).for_variant("fenced"), tmp_path / "ref", maps=False,
                   progress=False)
    assert_same_results(out / "fenced", ref)
