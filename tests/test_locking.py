"""screening.locking: the run lock without fcntl (as on Windows). tests/test_runs.py covers the lock of a
real run (exit 3, nothing touched)."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

# A stand-in for Windows' msvcrt: byte-range locks through POSIX record locks (lockf, per process,
# like msvcrt's), and fcntl made unimportable, so screening.locking must take its Windows path (the
# stand-in is seen by screening.locking only: other modules take its presence for Windows).
_AS_WINDOWS = textwrap.dedent("""
    import asyncio, subprocess  # these look for msvcrt themselves: imported before the stand-in
    import fcntl as _real, sys, types
    fake = types.ModuleType("msvcrt")
    fake.LK_UNLCK, fake.LK_NBLCK = 0, 2
    def locking(fd, mode, nbytes):
        if mode == fake.LK_NBLCK:
            # msvcrt locks a read-only handle too; a POSIX write lock needs write access: read lock then
            kind = _real.LOCK_EX if _writable(fd) else _real.LOCK_SH
            try:
                _real.lockf(fd, kind | _real.LOCK_NB, nbytes, 0)
            except OSError:
                raise PermissionError(13, "Permission denied") from None
        else:
            _real.lockf(fd, _real.LOCK_UN, nbytes, 0)
    def _writable(fd):
        import os
        return _real.fcntl(fd, _real.F_GETFL) & os.O_ACCMODE != os.O_RDONLY
    fake.locking = locking
    sys.modules["msvcrt"] = fake
    sys.modules["fcntl"] = None
    import screening.locking
    del sys.modules["msvcrt"]
""")


def _py(code: str, *args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env, timeout=timeout)


def test_runner_imports_without_fcntl_or_msvcrt():
    r = _py(
        "import sys; sys.modules['fcntl'] = None; sys.modules['msvcrt'] = None\n"
        "import screening.runner, screening.cli, screening.locking as L, screening.runs.lock as RL\n"
        "import tempfile, pathlib\n"
        "p = pathlib.Path(tempfile.mkdtemp()) / 'x.lock'; p.write_text('')\n"
        "print(L.BACKEND, RL.lock_held(str(p)))\n"
        "try:\n    RL.Lock(str(p)).__enter__()\n"
        "except screening.errors.StoreError as e:\n    print('refused:', e)\n"
    )
    assert r.returncode == 0, r.stderr
    backend, held = r.stdout.splitlines()[0].split()
    assert (backend, held) == ("none", "False")
    assert "refused:" in r.stdout and "file locking is not available" in r.stdout


def test_windows_path_locks_against_a_second_process(tmp_path):
    lock = tmp_path / "screening.duckdb.lock"
    ready = tmp_path / "ready"
    holder = _AS_WINDOWS + textwrap.dedent(f"""
        import time, pathlib, screening.runs.lock as r, screening.locking as L
        assert L.BACKEND == "msvcrt", L.BACKEND
        with r.Lock({str(lock)!r}):
            pathlib.Path({str(ready)!r}).write_text("x")
            time.sleep(60)
    """)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    p = subprocess.Popen(
        [sys.executable, "-c", holder], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    try:
        for _ in range(600):
            if ready.exists() or p.poll() is not None:
                break
            import time

            time.sleep(0.1)
        assert ready.exists(), p.stderr.read() if p.poll() is not None else "holder not ready"
        second = _AS_WINDOWS + textwrap.dedent(f"""
            import screening.runs.lock as r
            from screening.errors import LockedError
            print(r.lock_held({str(lock)!r}))
            try:
                r.Lock({str(lock)!r}).__enter__()
            except LockedError as e:
                print("locked:", e)
        """)
        r = _py(second)
        assert r.returncode == 0, r.stderr
        assert r.stdout.splitlines()[0] == "True"
        assert "locked: another ddscreen run holds the lock" in r.stdout and "nothing was changed" in r.stdout
    finally:
        p.kill()
        p.wait()
    # released with its process: a new holder takes it
    again = _AS_WINDOWS + textwrap.dedent(f"""
        import screening.runs.lock as r
        print(r.lock_held({str(lock)!r}))
        with r.Lock({str(lock)!r}):
            print("taken")
    """)
    r = _py(again)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["False", "taken"]
