"""The operator cache: reuse, permittivity scaling, keys, corrupt entries, location.

Reference for the scaling: C is proportional to the permittivity of a uniform medium (closed
form: the Laplace problem has eps only as a factor). Other checks compare a cached run with
the run that filled the cache.
"""

import numpy as np
import pytest
from conftest import make_panels

from bem3d.geometry import shapes
from bem3d.operators.cache import OperatorCache, cache_key, default_folder
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
