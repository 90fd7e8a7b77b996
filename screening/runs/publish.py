"""Publishing a run's folder: the output folder checked before the lock, the temporary folder beside
the target, its rename into place, what dead runs left (stale temporary and set-aside folders), the
failed run's log, and ``latest`` and pruning after a published run. Which folders and files are the
tool's own (recorded manifests, the pruning rule) is ``screening/published.py``: only those are ever
removed."""

from __future__ import annotations

import datetime as _dt
import logging
import os
import shutil
import tempfile
import uuid
from pathlib import Path

from .. import published
from ..errors import OutputError, ScreeningError
from ..store import Store

log = logging.getLogger("ddscreen")


def check_output_folder(target: Path, root: Path | None, label: str, db_path, *, force: bool) -> None:
    """Before the lock: the ``latest`` slot and the target are ours to replace, and the parent folder
    exists and is writable; a refusal changes nothing."""
    if root is not None:
        published.check_latest_slot(root)
    if not Path(db_path).exists():
        published.check_target(None, target, label, force=force)  # no database: nothing here is ours
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{target.parent}: cannot create the output folder ({exc.strerror or exc})") from None
    if not os.access(target.parent, os.W_OK):
        raise OutputError(f"{target.parent}: output folder is not writable; earlier outputs are untouched")


def make_temp(target: Path) -> Path:
    """The temporary folder ``.<name>.tmp-*`` beside ``target``, with the permissions of a folder made
    under the user's umask (the published folder is for readers)."""
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.tmp-", dir=target.parent))
    except OSError as exc:
        raise OutputError(
            f"{target.parent}: cannot write there ({exc.strerror or exc}); earlier outputs untouched"
        ) from None
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o777 & ~umask)  # mkdtemp makes it private; the published folder is for readers
    return tmp


def tidy_root(root: Path, store: Store, keep: int, target: Path) -> None:
    """After a published run: ``latest`` to the newest quarter, old quarters pruned.

    The run is published and recorded by now, so a failure here is a warning, not a failed
    run; the next run does both again.
    """
    try:
        published.point_latest(root, store)
        for note in published.prune(root, keep, store, current=target):
            log.info("%s", note)
    except (OSError, ScreeningError) as exc:
        log.warning("the outputs are published, but tidying %s failed (%s); the next run tries again", root, exc)


def publish(tmp: Path, target: Path) -> None:
    """Move the finished folder into place; on failure the earlier outputs are where they were."""
    old = None
    try:
        if target.exists() or target.is_symlink():
            old = target.with_name(f".{target.name}.old-{uuid.uuid4().hex[:6]}")
            os.replace(target, old)
        os.replace(tmp, target)
    except OSError as exc:
        if old is not None and old.exists() and not target.exists():
            try:
                os.replace(old, target)
            except OSError:
                pass  # the next run puts them back (see clean_stale_temp)
        raise OutputError(
            f"{target}: cannot move the outputs into place ({exc.strerror or exc}); earlier outputs are untouched"
        ) from None
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def clean_stale_temp(target: Path, current: Path | None) -> list[str]:
    """Tidy what runs that died left in the output folder (called under the lock).

    A temporary folder ``.<label>.tmp-*`` is removed; its log is kept beside the target as
    ``<label>.interrupted-<time>.log``. A folder ``.<label>.old-*`` (earlier outputs set aside
    by :func:`publish` just before the rename) is put back when ``<label>`` is missing,
    removed otherwise.
    """
    parent = target.parent
    notes: list[str] = []
    for p in sorted(parent.glob(".*.old-*")):
        if not p.is_dir() or p.is_symlink() or not (p / published.ANCHOR).is_file():
            continue  # a set-aside folder of ours always holds its summary
        home = parent / p.name[1:].rsplit(".old-", 1)[0]
        if not home.exists() and not home.is_symlink():
            os.replace(p, home)
            notes.append(f"restored {home}, set aside by an interrupted run")
        else:
            shutil.rmtree(p, ignore_errors=True)
    for p in sorted(parent.glob(".*.tmp-*")):
        if p == current or not p.is_dir() or p.is_symlink():
            continue
        if any(x.name != "run.log" for x in p.iterdir()) and not (p / "run.log").is_file():
            continue  # ours start with their run.log at once (or are still empty)
        name = p.name[1:].rsplit(".tmp-", 1)[0]
        logf = p / "run.log"
        try:
            if logf.exists():
                stamp = _dt.datetime.fromtimestamp(logf.stat().st_mtime).strftime("%Y%m%dT%H%M%S")
                shutil.move(str(logf), parent / f"{name}.interrupted-{stamp}.log")
        except OSError:
            pass
        shutil.rmtree(p, ignore_errors=True)
        notes.append(f"removed {p}, left by an interrupted run")
    return notes


def keep_failure_log(tmp: Path, target: Path, *, quiet: bool = False) -> None:
    logf = tmp / "run.log"
    try:
        if logf.exists():
            dest = target.parent / f"{target.name}.failed-{_dt.datetime.now().strftime('%Y%m%dT%H%M%S')}.log"
            shutil.move(str(logf), dest)
            (log.debug if quiet else log.error)("the log of the failed run is %s", dest)
    except OSError:
        pass
    shutil.rmtree(tmp, ignore_errors=True)


def discard_interrupted(tmp: Path, target: Path) -> None:
    """After a stop signal: the temporary folder removed, its log kept beside the target as
    ``<label>.interrupted-<time>.log``; earlier outputs set aside by :func:`publish` put back."""
    logf = tmp / "run.log"
    try:
        if logf.exists():
            stamp = _dt.datetime.now().strftime("%Y%m%dT%H%M%S")
            shutil.move(str(logf), target.parent / f"{target.name}.interrupted-{stamp}.log")
    except OSError:
        pass
    shutil.rmtree(tmp, ignore_errors=True)
    if not target.exists() and not target.is_symlink() and any(target.parent.glob(f".{target.name}.old-*")):
        clean_stale_temp(target, tmp)
