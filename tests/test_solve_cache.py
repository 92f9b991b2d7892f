"""Where the compiled kernels are cached, also in a read-only installation."""

from __future__ import annotations

import json
import os
import shutil
import stat
import subprocess
import sys
from pathlib import Path

import preyscape
from preyscape.solve import kernels


def test_cache_folder_keeps_numbas_choice_when_it_can(tmp_path):
    # design requirement: a writable package folder (numba's __pycache__) or a
    # NUMBA_CACHE_DIR set by the user stand; nothing is redirected
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    env = {"XDG_CACHE_HOME": str(tmp_path / "xdg")}
    assert kernels.cache_folder(pkg, env) is None
    assert (pkg / "__pycache__").is_dir()
    blocked = tmp_path / "blocked"
    blocked.mkdir()
    (blocked / "__pycache__").write_text("a file where the cache folder would go")
    assert kernels.cache_folder(blocked, {**env, "NUMBA_CACHE_DIR": str(tmp_path)}) is None


def test_cache_folder_falls_back_to_the_user_cache(tmp_path, monkeypatch):
    # design requirement: an unwritable __pycache__ sends the cache to
    # $XDG_CACHE_HOME/preyscape/numba, else ~/.cache/preyscape/numba
    blocked = tmp_path / "blocked"
    blocked.mkdir()
    (blocked / "__pycache__").write_text("a file: no folder can be made here")
    xdg = tmp_path / "xdg"
    folder = xdg / "preyscape" / "numba"
    assert kernels.cache_folder(blocked, {"XDG_CACHE_HOME": str(xdg)}) == folder
    assert folder.is_dir()
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    home_cache = tmp_path / "home" / ".cache" / "preyscape" / "numba"
    assert kernels.cache_folder(blocked, {}) == home_cache
    # no writable folder anywhere: numba's own choice (it may still find one)
    (tmp_path / "nowhere").write_text("a file, not a folder")
    assert kernels.cache_folder(blocked, {"XDG_CACHE_HOME": str(tmp_path / "nowhere")}) is None


COMPILE_AND_REPORT = """
import json, numpy as np
from preyscape.solve import kernels
mask = np.ones((5, 6), bool)
cx = np.full((5, 7), 0.5, np.float32)
w = np.ones((5, 6), np.float32)
inv = np.empty((5, 6))
kernels.factor_x(cx, w, mask, 0.25, inv)
st = kernels._factor_rows.stats
print(json.dumps({"file": kernels.__file__, "folder": str(kernels.CACHE_FOLDER),
                  "hits": sum(st.cache_hits.values()), "misses": sum(st.cache_misses.values()),
                  "inv": inv.tolist()}))
"""


def _read_only(root: Path) -> None:
    for p in [root, *root.rglob("*")]:
        mode = p.stat().st_mode
        p.chmod(mode & ~(stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH))


def test_read_only_install_compiles_once_then_loads_from_the_user_cache(tmp_path):
    # design requirement: a non-editable install in a read-only site-packages still
    # caches: the first process compiles into the user cache, the next loads from it
    site = tmp_path / "site-packages"
    src = Path(preyscape.__file__).parent
    shutil.copytree(src, site / "preyscape", ignore=shutil.ignore_patterns("__pycache__"))
    # a file where numba would make its cache folder: unwritable even for root,
    # who ignores the permission bits set next
    (site / "preyscape" / "solve" / "__pycache__").write_text("read-only installation")
    _read_only(site)
    xdg = tmp_path / "xdg"
    env = {k: v for k, v in os.environ.items() if not k.startswith("NUMBA_CACHE")}
    env.update(PYTHONPATH=str(site), XDG_CACHE_HOME=str(xdg), PYTHONDONTWRITEBYTECODE="1")
    runs = []
    try:
        for _ in range(2):
            out = subprocess.run([sys.executable, "-c", COMPILE_AND_REPORT], env=env,
                                 capture_output=True, text=True, check=True, cwd=tmp_path)
            runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    finally:
        for p in [site, *site.rglob("*")]:  # let pytest clean up
            p.chmod(p.stat().st_mode | stat.S_IWUSR)
    folder = xdg / "preyscape" / "numba"
    assert all(Path(r["file"]).is_relative_to(site) for r in runs)  # the copy was imported
    assert [r["folder"] for r in runs] == [str(folder)] * 2
    assert runs[0]["misses"] == 1 and runs[0]["hits"] == 0  # compiled and saved
    assert runs[1]["hits"] == 1 and runs[1]["misses"] == 0  # loaded from the user cache
    assert list(folder.rglob("*.nbi")) and list(folder.rglob("*.nbc"))
    assert not list(site.rglob("*.nbi"))
    assert runs[0]["inv"] == runs[1]["inv"]
