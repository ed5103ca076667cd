"""The output folder of a run: nothing lost, nothing half written.

A run reserves its folder before it computes anything (:func:`reserved`):

- the destination's parent must be writable and have room for an estimate of the outputs;
- a lock file beside the folder (``.<name>.nfmap-lock``, holding the process id) keeps two runs
  from writing the same folder; a lock whose process is gone is stale and taken over;
- a swap left half done by a crash is finished (a complete new record is moved in) or rolled
  back (the old record is moved back), and temporary folders of dead runs are removed;
- an existing folder is replaced only with ``force``, and only if an earlier run wrote it
  (its manifest ``.nfmap-record.json`` lists its files) and it holds nothing else: the user's own
  files (a site file, notes) are never deleted.

The record is written into a temporary sibling, its manifest last, then swapped in by two renames.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import os
import shutil
from collections.abc import Callable, Iterator
from pathlib import Path

from . import __version__

MANIFEST = ".nfmap-record.json"


class OutputError(ValueError):
    """The output folder cannot be used (the reason names the path); nothing was written."""


class OutputExistsError(OutputError, FileExistsError):
    """The folder exists and ``force`` was not given."""


def _lock_path(out: Path) -> Path:
    return out.with_name(f".{out.name}.nfmap-lock")


def _old_path(out: Path) -> Path:
    return out.with_name(f".{out.name}.nfmap-old")


def _tmp_prefix(out: Path) -> str:
    return f".{out.name}.nfmap-tmp-"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def manifest(folder: Path) -> dict | None:
    """The manifest of a folder an nfmap run wrote, or None."""
    try:
        doc = json.loads((Path(folder) / MANIFEST).read_text())
    except (OSError, ValueError):
        return None
    return doc if isinstance(doc, dict) and doc.get("tool") == "nfmap" and isinstance(doc.get("files"), list) else None


def is_record(folder: Path) -> bool:
    """True if an nfmap run wrote ``folder`` and it holds nothing but what that run wrote."""
    doc = manifest(folder)
    if doc is None:
        return False
    present = {p.name for p in Path(folder).iterdir()}
    return present <= {*doc["files"], MANIFEST}


def _foreign_files(folder: Path) -> list[str]:
    doc = manifest(folder) or {"files": []}
    return sorted(p.name for p in Path(folder).iterdir() if p.name not in {*doc["files"], MANIFEST})


def _take_lock(out: Path) -> Path:
    lock = _lock_path(out)
    for _ in range(2):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            try:
                pid = int(lock.read_text().strip() or 0)
            except (OSError, ValueError):
                pid = 0
            if pid and pid != os.getpid() and _alive(pid):
                raise OutputError(f"{out}: another nfmap run (process {pid}) is writing this folder; wait for it to "
                                  "finish or give another -o") from None
            with contextlib.suppress(FileNotFoundError):
                lock.unlink()  # stale: its process is gone
            continue
        except OSError as err:
            raise OutputError(f"{out.parent}: cannot write here ({err.strerror}); give another -o") from None
        with os.fdopen(fd, "w") as f:
            f.write(f"{os.getpid()}\n")
        return lock
    raise OutputError(f"{out}: cannot take the lock {lock.name}")


def recover(out: Path) -> list[str]:
    """Finish or roll back a swap left half done, and remove temporaries of dead runs (under the lock).

    Returns what was done, one sentence each.
    """
    done = []
    old = _old_path(out)
    temps = sorted(p for p in out.parent.glob(_tmp_prefix(out) + "*") if p.is_dir())
    complete = [p for p in temps if manifest(p) is not None]
    if old.exists() and not out.exists():
        if complete:
            complete[-1].rename(out)
            done.append(f"finished an interrupted replacement of {out} (the new record was complete)")
            shutil.rmtree(old, ignore_errors=True)
        else:
            old.rename(out)
            done.append(f"rolled back an interrupted replacement of {out} (the earlier record is kept)")
    elif old.exists():
        shutil.rmtree(old, ignore_errors=True)
        done.append(f"removed the earlier copy left beside {out} by an interrupted run")
    for p in temps:
        if p.exists():
            shutil.rmtree(p, ignore_errors=True)
            done.append(f"removed the temporary folder {p.name} of an interrupted run")
    return done


class Reservation:
    """A reserved output folder; :meth:`commit` writes and swaps the record in."""

    def __init__(self, out: Path, force: bool, notes: list[str]):
        self.out, self.force, self.notes = out, force, notes
        self._tmp: Path | None = None

    def commit(self, write: Callable[[Path], None], meta: dict | None = None) -> Path:
        """``write(tmp)`` fills a temporary folder; the manifest goes in last; then the swap."""
        out = self.out
        tmp = out.with_name(f"{_tmp_prefix(out)}{os.getpid()}")
        shutil.rmtree(tmp, ignore_errors=True)
        tmp.mkdir()  # the user's umask applies: records are ordinary files
        self._tmp = tmp
        write(tmp)
        doc = {"tool": "nfmap", "version": __version__,
               "created": dt.datetime.now(dt.UTC).replace(microsecond=0).isoformat(),
               "files": sorted(p.name for p in tmp.iterdir()), **(meta or {})}
        (tmp / MANIFEST).write_text(json.dumps(doc, indent=1) + "\n")
        if out.exists():
            if not self.force:
                raise OutputExistsError(f"{out} appeared while this run was computing; nothing was replaced "
                                        "(the new record was not kept)")
            if not is_record(out):
                raise OutputError(f"{out} changed while this run was computing and is no longer only an nfmap "
                                  "record; nothing was replaced")
            old = _old_path(out)
            out.rename(old)
            tmp.rename(out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            tmp.rename(out)
        self._tmp = None
        return out

    def _abandon(self) -> None:
        if self._tmp is not None:
            shutil.rmtree(self._tmp, ignore_errors=True)
            self._tmp = None


def check_destination(out: Path, force: bool) -> None:
    """Refuse an existing folder without ``force``, or one that is not only an nfmap record."""
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out} is a file, not a folder; give another -o")
    if out.exists():
        if not force:
            raise OutputExistsError(f"{out} exists; give --force to replace it (or -o another folder)")
        if manifest(out) is None:
            raise OutputError(f"{out} is not a folder an nfmap run wrote (no {MANIFEST}): --force replaces only "
                              "nfmap's own output folders; give another -o")
        foreign = _foreign_files(out)
        if foreign:
            shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
            raise OutputError(f"{out} holds files nfmap did not write ({shown}); --force never deletes them: "
                              "move them or give another -o")
    cwd = Path.cwd().resolve()
    if out.exists() and (out.resolve() == cwd or out.resolve() in cwd.parents):
        raise OutputError(f"{out} is the current folder or one of its parents; give another -o")


@contextlib.contextmanager
def reserved(out: Path, force: bool = False, estimate_bytes: int = 0) -> Iterator[Reservation]:
    """Reserve ``out`` before computing (see the module docstring); release it on the way out.

    Raises :class:`OutputError` (or :class:`OutputExistsError`) with a one-line reason before any
    work is done when the folder cannot be used.
    """
    out = Path(out)
    if out.name in ("", ".", ".."):
        out = out.resolve()
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f"{out.parent}: cannot create the folder ({err.strerror}); give another -o") from None
    if not os.access(out.parent, os.W_OK | os.X_OK):
        raise OutputError(f"{out.parent}: not writable; give another -o")
    lock = _take_lock(out)
    res = None
    try:
        notes = recover(out)
        check_destination(out, force)
        free = shutil.disk_usage(out.parent).free
        if estimate_bytes and free < 2 * estimate_bytes:
            raise OutputError(f"{out.parent}: {free / 1e6:.0f} MB free, the record needs about "
                              f"{estimate_bytes / 1e6:.0f} MB (twice that kept free while swapping); free some space "
                              "or give another -o")
        res = Reservation(out, force, notes)
        yield res
    finally:
        if res is not None:
            res._abandon()
        with contextlib.suppress(FileNotFoundError):
            lock.unlink()
