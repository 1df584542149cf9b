"""Start-up: the command line loads heavy libraries only when a command needs them; the first run
with an empty compile cache says so (timings are measured in benchmarks/, not asserted here)."""

import hashlib
import pickle
import subprocess
import sys
import time

import pytest

from cluttersim import compile_notice

HEAVY = ("numba", "xarray", "rasterio", "matplotlib", "scipy", "pyproj", "h5py")


def _loaded_after(code: str) -> list[str]:
    tail = f"import sys\nprint(' '.join(m for m in {HEAVY!r} if m in sys.modules), file=sys.stderr)"
    out = subprocess.run([sys.executable, "-c", f"{code}\n{tail}"], capture_output=True, text=True, check=True)
    return out.stderr.split()


def test_version_and_help_load_no_heavy_library():
    assert _loaded_after("import cluttersim, cli.main\ncli.main.cli.main(['--version'], standalone_mode=False)") == []
    assert _loaded_after("import cli.main\ncli.main.cli.main(['simulate', '--help'], standalone_mode=False)") == []
    assert _loaded_after("import cli.main\ncli.main.cli.main(['survey', '--help'], standalone_mode=False)") == []


def test_public_names_load_on_first_use():
    code = "import cluttersim\nassert 'numba' not in __import__('sys').modules\nfrom cluttersim import simulate, Track"
    assert "numba" in _loaded_after(code)  # simulate needs the kernels
    # the function, not the module of the same name, whatever was imported first
    out = subprocess.run([sys.executable, "-c", "import cluttersim.products, cluttersim\nprint(callable(cluttersim.simulate))"],
                         capture_output=True, text=True, check=True)  # fmt: skip
    assert out.stdout.strip() == "True"


def test_compile_notice_when_the_cache_is_empty(tmp_path, monkeypatch):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path))
    said = []
    digest = hashlib.sha256((compile_notice._kernels_dir() / "diffuse.py").read_bytes()).digest()
    with compile_notice.compile_notice(said.append, poll_s=0.05):
        index = tmp_path / "x" / "cluttersim" / "kernels" / "diffuse.accumulate_power-1.py311.nbi"
        index.parent.mkdir(parents=True)
        index.write_bytes(pickle.dumps("0.0") + pickle.dumps((digest, {})))  # as Numba writes it
        time.sleep(0.2)
    assert said == [compile_notice.MESSAGE] and "about a minute" in said[0]
    # an index of this diffuse.py: the cache is used, nothing said
    said.clear()
    with compile_notice.compile_notice(said.append):
        pass
    assert said == []
    # an index of another diffuse.py is stale (Numba recompiles): said again
    index.write_bytes(pickle.dumps("0.0") + pickle.dumps((hashlib.sha256(b"other").digest(), {})))
    with compile_notice.compile_notice(said.append, poll_s=0.05):
        pass
    assert said == [compile_notice.MESSAGE]
    # each module's index holds that module's digest: diffuse.py's digest under another module's name is stale
    said.clear()
    other = index.with_name("geodesy.grid_to_ecef-1.py311.nbi")
    other.write_bytes(pickle.dumps("0.0") + pickle.dumps((digest, {})))
    with compile_notice.compile_notice(said.append, poll_s=0.05):
        pass
    assert said == [compile_notice.MESSAGE]
    # every kernel module is covered: a fresh index of the coherent kernels counts
    coherent = hashlib.sha256((compile_notice._kernels_dir() / "coherent.py").read_bytes()).digest()
    other.with_name("coherent.accumulate_specular-1.py311.nbi").write_bytes(pickle.dumps("0.0") + pickle.dumps((coherent, {})))
    said.clear()
    with compile_notice.compile_notice(said.append):
        pass
    assert said == []
    assert {p.stem for p in compile_notice.kernel_sources()} >= {"diffuse", "coherent", "geodesy", "tiling", "weights"}


def test_the_notice_reads_numbas_own_index_of_the_warm_cache():
    """This tree's cache, made by the tests that ran the kernels: Numba's real index files hold the digest."""
    import numba  # noqa: F401 - only to be sure the kernels were compiled in this tree
    from cluttersim import kernels  # noqa: F401

    if not list(compile_notice._kernels_dir().glob("__pycache__/*.nbi")):
        pytest.skip("no compiled kernels cached in this tree yet")
    assert compile_notice.cache_index_files()
