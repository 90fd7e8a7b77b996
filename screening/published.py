"""What the tool published, and only that: folder ownership, the ``latest`` link, pruning.

Every successful run records in the database the files it published into its output folder
(relative path → SHA-256, ``runs.files``). A folder is the tool's own only while it holds
such a set: its ``run.log`` (which names the run; ``summary.json`` is the same for two
runs of the same inputs) matches a recorded run of that folder. Only then may
a run replace it (``--force``) or prune it, and pruning removes only the recorded files whose
content is unchanged; anything else in the folder (a user's notes, an edited copy) stays, and
so does the folder. Folders the database does not know — a user's copy "2026-Q2 sent to
board", an archive — are never touched, whatever their name or content.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import uuid
from pathlib import Path

from .errors import ConfigError
from .store import Store

log = logging.getLogger("ddscreen")

ANCHOR = "run.log"  # the file whose hash identifies the run that wrote a folder (it names the run)
LATEST = "latest"  # the link to the newest quarter in an output root


def _base(store: Store) -> Path:
    """The database's folder: output folders below it are recorded relative to it."""
    return Path(os.path.realpath(Path(store.path).parent))


def folder_key(path: Path | str, store: Store) -> str:
    """The form in which a folder is recorded: relative to the database's folder when it lies
    below it (so a site moved or copied whole still knows its folders), else absolute; links in
    its parent resolved."""
    p = Path(path)
    full = Path(os.path.realpath(p.parent)) / p.name
    rel = os.path.relpath(full, _base(store))
    return full.as_posix() if rel.startswith("..") else Path(rel).as_posix()


def folder_of(key: str, store: Store) -> Path:
    """The folder a recorded key names (see :func:`folder_key`)."""
    return _base(store) / key if key and not os.path.isabs(key) else Path(key)


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def entries(folder: Path) -> list[str]:
    """Every file and link under ``folder`` (relative POSIX paths, sorted); [] if it is absent."""
    if not folder.is_dir() or folder.is_symlink():
        return []
    out = []
    for dirpath, dirnames, filenames in os.walk(folder):
        for name in filenames + [d for d in dirnames if os.path.islink(os.path.join(dirpath, d))]:
            out.append(Path(os.path.relpath(os.path.join(dirpath, name), folder)).as_posix())
    return sorted(out)


def manifest(folder: Path) -> dict[str, str]:
    """What a finished output folder holds: relative path → SHA-256 of each file."""
    return {rel: file_sha256(folder / rel) for rel in entries(folder) if not (folder / rel).is_symlink()}


def matches(folder: Path, files: dict[str, str], rel: str) -> bool:
    p = folder / rel
    try:
        return p.is_file() and not p.is_symlink() and files.get(rel) == file_sha256(p)
    except OSError:
        return False


def recorded_files(store: Store, folder: Path) -> dict[str, str] | None:
    """The recorded files of the run whose outputs ``folder`` holds, or None if it is not the tool's."""
    for _run_id, files in store.rows("published_files_of_folder", {"out_dir": folder_key(folder, store)}):
        rec = json.loads(files)
        if ANCHOR in rec and matches(folder, rec, ANCHOR):
            return rec
    return None


def foreign(folder: Path, files: dict[str, str]) -> list[str]:
    """Files in ``folder`` that the run which recorded ``files`` did not write (or that changed since)."""
    return [rel for rel in entries(folder) if not matches(folder, files, rel)]


def _few(names: list[str], n: int = 3) -> str:
    shown = ", ".join(names[:n])
    return shown + (f" and {len(names) - n} more" if len(names) > n else "")


def check_target(store: Store | None, target: Path, label: str, *, force: bool) -> None:
    """Refuse (exit 2, nothing changed) to write into a folder unless the rule allows it.

    The rule, the same for ``--out`` and for quarter folders: a missing or empty folder is
    written; a folder that holds the tool's own outputs is replaced only with ``--force``;
    a folder holding anything the tool did not write is never replaced.
    """
    if target.exists() and not target.is_dir():
        raise ConfigError(f"{target}: exists and is not a folder; nothing was changed (choose another output folder)")
    if target.is_symlink():
        raise ConfigError(
            f"{target}: is a link, not a folder ddscreen wrote; nothing was changed (choose another output folder)"
        )
    found = entries(target)
    if not found:
        return
    files = recorded_files(store, target) if store is not None else None
    if files is None:
        raise ConfigError(
            f"{target}: holds files ddscreen did not write ({_few(found)}); nothing was changed "
            "(choose a new or empty output folder)"
        )
    if not force:
        raise ConfigError(
            f"{target} already holds the outputs of {label}; nothing was changed (use --force to replace them)"
        )
    other = foreign(target, files)
    if other:
        raise ConfigError(
            f"{target}: holds files ddscreen did not write or that were changed since "
            f"({_few(other)}); --force replaces only a folder exactly as ddscreen wrote it; "
            "move them elsewhere first; nothing was changed"
        )


def check_latest_slot(root: Path) -> None:
    """``<root>/latest`` must be absent or the tool's link: a real folder or file there is the user's."""
    link = root / LATEST
    if link.is_symlink() or not link.exists():
        return
    kind = "folder" if link.is_dir() else "file"
    raise ConfigError(
        f"{link}: is a {kind} that ddscreen did not write, where it keeps the link to the newest "
        f"quarter; rename it; nothing was changed"
    )


def settle_dead_runs(store: Store) -> list[str]:
    """Mark runs whose process died (we hold the lock), from what their folders hold.

    A run that died after its folder was renamed into place but before it was marked
    ``ok`` is ``ok`` (its folder holds exactly what it recorded); one that died earlier is
    ``interrupted``, as is every run still ``running``. Returns one note per settled run.
    """
    notes = []
    for run_id, out_dir, files, shown in store.rows("runs_publishing"):
        folder = folder_of(out_dir, store)
        rec = json.loads(files) if files else {}
        done = ANCHOR in rec and matches(folder, rec, ANCHOR)
        store.execute(
            "set_run_status",
            {
                "run_id": run_id,
                "status": "ok" if done else "interrupted",
                "message": "" if done else "the process ended while publishing",
            },
        )
        notes.append(
            f"run {shown} ended while publishing: marked {'ok (its outputs are in place)' if done else 'interrupted'}"
        )
    with store.transaction():  # a run still 'running' died before it recorded its files: none of its rows
        store.execute("forget_results_of_stale_runs")
        store.execute("forget_rejects_of_stale_runs")
        store.execute("mark_stale_runs")
    return notes


def display_status(status: str, folder: Path, files: str | None, *, lock_held: bool) -> str:
    """The status a reader should see for a recorded run (read-only; nothing is written)."""
    if lock_held or status not in ("running", "publishing"):
        return status
    if status == "publishing" and files:
        rec = json.loads(files)
        if ANCHOR in rec and matches(folder, rec, ANCHOR):
            return "ok"
    return "interrupted"


def _owned_folders(store: Store, root: Path) -> list[tuple[Path, dict[str, str]]]:
    """The tool's own folders directly under ``root``, newest window first."""
    out = []
    root_dir = folder_of(folder_key(root, store), store)
    for out_dir, _we, _started in store.rows("published_folders"):
        p = folder_of(out_dir, store)
        if p.parent != root_dir or p.name == LATEST:
            continue
        files = recorded_files(store, p)
        if files is not None:
            out.append((p, files))
    return out


def point_latest(root: Path, store: Store) -> None:
    """``<root>/latest`` → the tool's folder with the newest window (never moved backwards)."""
    owned = _owned_folders(store, root)
    if not owned:
        return
    check_latest_slot(root)
    link = root / LATEST
    name = owned[0][0].name
    if link.is_symlink() and os.readlink(link) == name:
        return
    tmp_link = root / f".latest-{uuid.uuid4().hex[:6]}"
    os.symlink(name, tmp_link)
    os.replace(tmp_link, link)


def remove_recorded(folder: Path, files: dict[str, str]) -> list[str]:
    """Delete the recorded files of ``folder`` that are unchanged, then its empty folders.

    Returns what was left (files the tool did not write or that were changed).
    """
    for rel in entries(folder):
        if matches(folder, files, rel):
            (folder / rel).unlink()
    for dirpath, _dirs, _files in os.walk(folder, topdown=False):
        try:
            os.rmdir(dirpath)  # only empty folders go
        except OSError:
            pass
    return entries(folder)


def prune(root: Path, keep: int, store: Store, *, current: Path) -> list[str]:
    """Keep the ``keep`` newest of the tool's own quarter folders under ``root``; remove the rest.

    Only folders recorded in the database and still holding what their run wrote are
    candidates; within them only the recorded, unchanged files are removed. Returns notes.
    """
    if keep <= 0:
        return []
    notes = []
    cur = folder_of(folder_key(current, store), store)
    for folder, files in [(p, f) for p, f in _owned_folders(store, root)[keep:] if p != cur]:
        left = remove_recorded(folder, files)
        if left:
            notes.append(
                f"kept {folder}: it holds files ddscreen did not write ({_few(left)}); its own files were removed"
            )
        else:
            notes.append(f"removed {folder} (older than the {keep} newest quarters)")
    return notes
