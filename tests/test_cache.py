"""The operator cache: reuse, permittivity scaling, keys, corrupt entries, location.

Reference for the scaling: C is proportional to the permittivity of a uniform medium (closed
form: the Laplace problem has eps only as a factor). Other checks compare a cached run with
the run that filled the cache. The size cap evicts the least recently used entries first
(the LRU rule: Mattson, Gecsei, Slutz and Traiger 1970, IBM Systems Journal 9(2), from
memory); last use is an entry's modification time, set here by hand where order matters.
"""

import os
import time

import numpy as np
import pytest
from conftest import make_panels

from bem3d.base.errors import ModelError
from bem3d.geometry import shapes
from bem3d.operators.cache import (
    DEFAULT_MAX_GB,
    OperatorCache,
    cache_key,
    default_folder,
    size_cap,
)
from bem3d.solve.conductors import solve_panels


@pytest.fixture(scope="module")
def pair():
    return make_panels(("a", shapes.octahedral_sphere(0.5, 10)),
                       ("b", shapes.box(0.6, 0.6, 0.6, 8, grading=0.5, center=(1.5, 0, 0))))


def run(panels, folder, **options):
    return solve_panels(panels, backend="compressed", cache=True, cache_dir=folder, **options)


def test_second_run_reuses_operator_and_solution(pair, tmp_path):
    first = run(pair, tmp_path)
    assert first.solver["cache"] == "stored"
    assert len(list(tmp_path.glob("*.npz"))) == 1
    again = run(pair, tmp_path, volts={"a": 3.0})
    assert again.solver["cache"] == "hit"
    assert again.solver["iterations"] == 0              # the cached solution is warm enough
    np.testing.assert_allclose(again.maxwell, first.maxwell, rtol=1e-12)
    doubled = run(pair, tmp_path, eps_r=2.0)
    assert doubled.solver["cache"] == "hit"
    np.testing.assert_allclose(doubled.maxwell, 2.0 * first.maxwell, rtol=1e-12)


def test_other_geometry_or_settings_get_other_keys(pair):
    settings = {"tolerance": 1e-5}
    key = cache_key(pair, settings)
    moved = pair.transformed(shift=(0.0, 0.0, 1e-9))
    assert cache_key(moved, settings) != key
    assert cache_key(pair, {"tolerance": 1e-6}) != key
    assert cache_key(pair, dict(settings)) == key


def test_corrupt_or_foreign_entries_are_rebuilt(pair, tmp_path):
    first = run(pair, tmp_path)
    (entry,) = tmp_path.glob("*.npz")
    data = bytearray(entry.read_bytes())
    data[len(data) // 2:len(data) // 2 + 64] = bytes(64)          # damage a member
    entry.write_bytes(bytes(data))
    rebuilt = run(pair, tmp_path)
    assert rebuilt.solver["cache"] == "stored"
    np.testing.assert_allclose(rebuilt.maxwell, first.maxwell, rtol=1e-12)
    # an entry whose recorded key is another one's is not used
    store = OperatorCache(tmp_path)
    (entry,) = tmp_path.glob("*.npz")
    store.save("0" * 64, {"x": np.zeros(3)})
    entry.write_bytes((tmp_path / ("0" * 64 + ".npz")).read_bytes())
    assert store.load(entry.stem, ["x"]) is None and not entry.exists()


def test_default_folder_follows_the_environment(monkeypatch, tmp_path):
    monkeypatch.delenv("BEM3D_CACHE_DIR", raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert default_folder() == tmp_path / "bem3d"
    monkeypatch.setenv("BEM3D_CACHE_DIR", str(tmp_path / "mine"))
    assert default_folder() == tmp_path / "mine"


def _age(path, seconds):
    then = time.time() - seconds
    os.utime(path, (then, then))


def test_the_cap_evicts_the_least_recently_used(tmp_path):
    store = OperatorCache(tmp_path, max_bytes=10**12)
    a = store.save("a" * 64, {"x": np.zeros(100_000)})
    b = store.save("b" * 64, {"x": np.zeros(100_000)})
    _age(a, 300)
    _age(b, 200)
    assert [e.path for e in store.entries()] == [a, b]
    assert store.load("a" * 64, ["x"]) is not None          # a reuse makes a the newest
    assert [e.path for e in store.entries()] == [b, a]
    size = a.stat().st_size
    store.max_bytes = int(2.5 * size)
    c = store.save("c" * 64, {"x": np.zeros(100_000)})
    assert not b.exists() and a.exists() and c.exists()
    assert sum(e.size for e in store.entries()) <= store.max_bytes


def test_an_entry_is_never_evicted_by_its_own_store(tmp_path):
    store = OperatorCache(tmp_path, max_bytes=1)            # smaller than any entry
    a = store.save("a" * 64, {"x": np.zeros(10)})
    assert a.exists()
    b = store.save("b" * 64, {"x": np.zeros(10)})
    assert b.exists() and not a.exists()


def test_a_solve_keeps_its_operator_under_a_tiny_cap(pair, tmp_path):
    first = run(pair, tmp_path, cache_max_bytes=1)
    assert first.solver["cache"] == "stored" and len(list(tmp_path.glob("*.npz"))) == 1
    assert run(pair, tmp_path, cache_max_bytes=1).solver["cache"] == "hit"


def test_clear_spares_temporary_files_and_other_folders(tmp_path):
    store = OperatorCache(tmp_path)
    old = store.save("a" * 64, {"x": np.zeros(3)})
    new = store.save("b" * 64, {"x": np.zeros(3)})
    _age(old, 3 * 86400)
    running = tmp_path / ".bem3d-tmp-1-x.npz"                # a save in progress
    running.write_bytes(b"")
    (tmp_path / "numba").mkdir()
    assert [e.path for e in store.clear(older_than_days=2)] == [old]
    assert new.exists()
    assert [e.path for e in store.clear()] == [new]
    assert running.exists() and (tmp_path / "numba").is_dir()


def test_size_cap_from_option_environment_or_default(monkeypatch):
    monkeypatch.delenv("BEM3D_CACHE_MAX_GB", raising=False)
    assert size_cap() == DEFAULT_MAX_GB * 1e9
    monkeypatch.setenv("BEM3D_CACHE_MAX_GB", "0.5")
    assert size_cap() == 5e8 and size_cap(2) == 2e9
    for bad in ("-1", "0", "nan", "lots"):
        monkeypatch.setenv("BEM3D_CACHE_MAX_GB", bad)
        with pytest.raises(ModelError, match="BEM3D_CACHE_MAX_GB"):
            size_cap()
    with pytest.raises(ModelError, match="cache_max"):
        size_cap(0)
