"""Tests of slipnet._cache: numba's kernel cache goes to a user cache folder, not into the package."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from slipnet import _cache

#: Prints NUMBA_CACHE_DIR as seen after ``import slipnet``; argv[1] == "no-platformdirs" hides platformdirs.
_PROBE = """
import os, sys
if sys.argv[1:] == ["no-platformdirs"]:
    sys.modules["platformdirs"] = None  # import platformdirs now raises ImportError
import slipnet
print(os.environ["NUMBA_CACHE_DIR"])
"""


def _run(code: str, env: dict[str, str], *args: str) -> str:
    out = subprocess.run([sys.executable, "-c", code, *args], env=env, capture_output=True, text=True, timeout=300,
                         check=True)
    return out.stdout.strip().splitlines()[-1]


def _env(tmp_path: Path, **extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in ("NUMBA_CACHE_DIR", "XDG_CACHE_HOME", "HOME")}
    env["HOME"] = str(tmp_path / "home")
    env["PYTHONPATH"] = os.pathsep.join([str(Path(__file__).resolve().parents[1]), env.get("PYTHONPATH", "")])
    env.update(extra)
    return env


@pytest.mark.parametrize("platformdirs", ["platformdirs", "no-platformdirs"])
def test_import_puts_the_numba_cache_under_the_user_cache_dir(tmp_path, platformdirs):
    if platformdirs == "platformdirs":
        pytest.importorskip("platformdirs")
    xdg = tmp_path / "xdg"
    got = Path(_run(_PROBE, _env(tmp_path, XDG_CACHE_HOME=str(xdg)), platformdirs))
    assert got.is_relative_to(tmp_path) and got.parts[-2:] == ("slipnet", "numba")
    if platformdirs == "no-platformdirs" or sys.platform.startswith("linux"):
        assert got == xdg / "slipnet" / "numba"
    # without XDG_CACHE_HOME: under the home folder
    got = Path(_run(_PROBE, _env(tmp_path), platformdirs))
    assert got.is_relative_to(tmp_path / "home") and got.parts[-2:] == ("slipnet", "numba")


def test_a_set_numba_cache_dir_is_respected(tmp_path):
    mine = str(tmp_path / "my numba cache")
    assert _run(_PROBE, _env(tmp_path, NUMBA_CACHE_DIR=mine, XDG_CACHE_HOME=str(tmp_path / "xdg"))) == mine


def test_compiled_kernels_are_written_there(tmp_path):
    code = """
import os, numpy as np
import slipnet
from slipnet.grains import _pair_kernels as k
k.row_pair_counts(3, 4, k.FORWARD_OFFSETS["square"])
print(os.environ["NUMBA_CACHE_DIR"])
"""
    cache = Path(_run(code, _env(tmp_path, XDG_CACHE_HOME=str(tmp_path / "xdg"))))
    assert any(p.name.startswith("_pair_kernels.row_pair_counts") for p in cache.rglob("*.nbi"))


def test_cache_dir_helper_without_platformdirs(monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "platformdirs", None)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert _cache.numba_cache_dir() == tmp_path / "slipnet" / "numba"
    monkeypatch.setenv("XDG_CACHE_HOME", "  ")  # blank: as unset
    monkeypatch.setenv("HOME", str(tmp_path / "h"))
    assert _cache.numba_cache_dir() == tmp_path / "h" / ".cache" / "slipnet" / "numba"


def test_use_user_numba_cache_only_fills_an_unset_variable(monkeypatch, tmp_path):
    monkeypatch.setattr(_cache, "numba_cache_dir", lambda: tmp_path / "c")
    monkeypatch.setenv("NUMBA_CACHE_DIR", "/somewhere/else")
    _cache.use_user_numba_cache()
    assert os.environ["NUMBA_CACHE_DIR"] == "/somewhere/else"
    monkeypatch.setenv("NUMBA_CACHE_DIR", "")  # empty counts as unset, as numba treats it
    _cache.use_user_numba_cache()
    assert os.environ["NUMBA_CACHE_DIR"] == str(tmp_path / "c")
    monkeypatch.delenv("NUMBA_CACHE_DIR")
    _cache.use_user_numba_cache()
    assert os.environ["NUMBA_CACHE_DIR"] == str(tmp_path / "c")
