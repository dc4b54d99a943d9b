"""The machine, not the input: read-only installs (numba's cache) and worker processes that
cannot start give one line and an exit status, never a traceback."""
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import tem
from tem._numba_cache import cache_setting

ROOT = Path(tem.__file__).parent
USER = os.getuid()


def _blocked(tmp_path, name):
    """A path under a regular file: no folder can be made there, even by root."""
    f = tmp_path / name
    f.write_text("")
    return f / "sub"


def test_cache_left_to_numba_when_it_can_write(tmp_path):
    assert cache_setting({}, tmp_path, None, tmp_path / "tmp") == (None, True)
    assert cache_setting({}, _blocked(tmp_path, "pkg"), tmp_path / "home", tmp_path / "tmp") \
        == (None, True)
    assert cache_setting({"NUMBA_CACHE_DIR": "/x"}, _blocked(tmp_path, "p"), None, "/nowhere") \
        == (None, True)
    assert not (tmp_path / "tmp").exists()


def test_cache_in_a_private_temporary_folder(tmp_path):
    folder, cache = cache_setting({}, _blocked(tmp_path, "pkg"), _blocked(tmp_path, "home"),
                                  tmp_path / "tmp")
    assert cache and folder == str(tmp_path / "tmp" / f"tem-numba-{USER}")
    assert (os.stat(folder).st_mode & 0o777) == 0o700


def test_cache_off_when_no_folder_can_be_used(tmp_path):
    args = ({}, _blocked(tmp_path, "pkg"), _blocked(tmp_path, "home"))
    assert cache_setting(*args, _blocked(tmp_path, "t")) == (None, False)
    # a link planted under the shared temporary folder is not followed
    (tmp_path / "tmp").mkdir()
    (tmp_path / "elsewhere").mkdir()
    (tmp_path / "tmp" / f"tem-numba-{USER}").symlink_to(tmp_path / "elsewhere")
    assert cache_setting(*args, tmp_path / "tmp") == (None, False)


@pytest.mark.skipif(USER != 0, reason="needs root to hand the folder to another user")
def test_cache_folder_of_another_user_refused(tmp_path):
    own = tmp_path / "tmp" / "tem-numba-0"
    own.mkdir(parents=True)
    os.chown(own, 65534, 65534)
    assert cache_setting({}, _blocked(tmp_path, "pkg"), _blocked(tmp_path, "home"),
                         tmp_path / "tmp") == (None, False)


@pytest.mark.parametrize("planted", [False, True])
def test_version_from_a_read_only_install(tmp_path, planted):
    """A copy of the package whose __pycache__ folders cannot be made, a home that cannot be
    written, NUMBA_CACHE_DIR unset: ``tem --version`` works (caching in a temporary folder,
    or off when that folder is taken)."""
    pkg = tmp_path / "site" / "tem"
    shutil.copytree(ROOT, pkg, ignore=shutil.ignore_patterns("__pycache__"))
    for d in [pkg, *[p for p in pkg.rglob("*") if p.is_dir()]]:
        (d / "__pycache__").write_text("")
    tmp = tmp_path / "tmp"
    tmp.mkdir()
    if planted:
        (tmp / f"tem-numba-{USER}").write_text("")
    env = {k: v for k, v in os.environ.items() if not k.startswith(("NUMBA_", "XDG_"))}
    env.update(HOME=str(_blocked(tmp_path, "home")), TMPDIR=str(tmp),
               PYTHONPATH=str(pkg.parent), PYTHONDONTWRITEBYTECODE="1")
    proc = subprocess.run([sys.executable, "-c", "import sys, tem; from tem.cli import main; "
                           "assert tem.__file__.startswith(sys.argv[1]), tem.__file__; "
                           "sys.exit(main(['--version']))", str(pkg)], env=env, cwd=tmp_path,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == f"tem {tem.__version__}" and proc.stderr == ""
    assert (tmp / f"tem-numba-{USER}").is_dir() != planted


def _refused(self, *a, **k):
    raise ConnectionRefusedError(111, "Connection refused")


@pytest.mark.parametrize("where", ["spawn", "queue", "python"])
def test_workers_that_cannot_start_one_line(tmp_path, capsys, monkeypatch, where):
    """The forkserver refusing its connection (workers start on the first submission), a
    semaphore that cannot be made, an interpreter this user cannot run (a venv linking into
    another user's home): one line naming the cure, exit status 1."""
    import concurrent.futures.process as cfp
    import multiprocessing.context as mpc
    import multiprocessing.spawn as mps

    from gated_fixture import write_two_stations
    from tem.cli import main

    (tmp_path / "g").mkdir()
    write_two_stations(tmp_path / "g")
    if where == "spawn":
        monkeypatch.setattr(cfp.ProcessPoolExecutor, "_spawn_process", _refused)
    elif where == "queue":
        monkeypatch.setattr(mpc.BaseContext, "Queue", _refused)
    else:
        (tmp_path / "python").write_text("")                 # no execute bit
        monkeypatch.setattr(mps, "get_executable", lambda: str(tmp_path / "python"))
    status = main(["rhoa", str(tmp_path / "g"), "--out", str(tmp_path / "o"), "--jobs", "2",
                   "--no-progress", "--no-figures"])
    err = capsys.readouterr().err
    assert status == 1 and "Traceback" not in err
    cause = f"{tmp_path / 'python'} cannot be run by this user" if where == "python" else \
        "ConnectionRefusedError: [Errno 111] Connection refused"
    assert err.strip().splitlines() == [
        f"tem rhoa: error: cannot start worker processes ({cause}); rerun with --jobs 1"]
