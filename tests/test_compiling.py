"""First-run compiling: noticed, announced once, timed apart; Numba's cache folder.

Reference: Numba's documented behaviour (numba.pydata.org, "Compiling Python code with
@jit"): a jitted function compiles on its first call with new argument types and not again.
"""

from numba import njit

from bem3d.base.cache_folders import choose_numba_cache, user_cache_folder
from bem3d.solve.compiling import announce_compiling, clock, compile_seconds_since


def test_a_compile_is_announced_once_and_timed(capsys):
    @njit
    def twice(x):
        return 2 * x

    mark = clock()
    with announce_compiling("dense", progress=True):
        assert twice(2) == 4
        assert twice(3) == 6
    err = capsys.readouterr().err
    assert err.count("compiling kernels") == 1 and "first run only" in err
    assert compile_seconds_since(mark) > 0
    mark = clock()
    with announce_compiling("dense", progress=True):
        assert twice(4) == 8                      # compiled already: no line, no time
    assert capsys.readouterr().err == ""
    assert compile_seconds_since(mark) == 0


def test_no_announcement_without_progress(capsys):
    @njit
    def plus_one(x):
        return x + 1

    with announce_compiling("compressed", progress=False):
        assert plus_one(1) == 2
    assert capsys.readouterr().err == ""


def test_numba_cache_moves_only_when_the_kernels_folder_is_not_writable(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    environ = {}
    assert choose_numba_cache(tmp_path / "kernels", environ) is None and environ == {}
    blocker = tmp_path / "a_file"
    blocker.write_text("")                        # no folder can be made under a file
    chosen = choose_numba_cache(blocker / "kernels", environ)
    assert chosen == user_cache_folder() / "numba" == tmp_path / "xdg" / "bem3d" / "numba"
    assert environ == {"NUMBA_CACHE_DIR": str(chosen)}
    mine = {"NUMBA_CACHE_DIR": str(tmp_path / "mine")}
    assert choose_numba_cache(blocker / "kernels", mine) is None     # the user's choice stays
    assert mine == {"NUMBA_CACHE_DIR": str(tmp_path / "mine")}
