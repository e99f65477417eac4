"""The output folder of a run: one run at a time, outputs staged and committed as one unit,
recovery after a kill, and reuse of finished work.

Layout inside an output folder (every name the tool creates starts with ``.euphotic`` or is
listed in the manifest):

``.euphotic.lock``
    Held (``flock``) by the run writing to the folder; its text says which process and since
    when. A second run refuses; a lock left by a process that died is taken over.
``.euphotic-stage-<run id>/``
    Staging area of one run: every output is written here first. ``stage.json`` lists the
    items that are complete, each with its fingerprint, and is rewritten (atomically) after
    each computed batch, so a later run can reuse them after a kill.
``.euphotic-stage-<run id>/COMMIT``
    Written once everything has succeeded: the list of files to move into place and of older
    outputs to delete. The moves are renames within one file system; a run killed during them
    is completed by the next run (roll forward) before anything else happens.
``euphotic_manifest.json``
    The committed run's manifest: tool version, time, config fingerprint, inputs and every
    output with its fingerprint. Written last, by the same commit.

Nothing else in the folder is ever touched.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import hashlib
import json
import logging
import os
import re
import shutil
import socket
import threading
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from euphotic.errors import EuphoticError, NoRunError  # noqa: F401 (re-exported)

log = logging.getLogger("euphotic")

LOCK_NAME = ".euphotic.lock"
STAGE_PREFIX = ".euphotic-stage-"
STAGE_INDEX = "stage.json"
COMMIT_NAME = "COMMIT"
MANIFEST_NAME = "euphotic_manifest.json"
#: Written by versions before staging existed: ``.NAME.part-PID`` beside the outputs.
_LEGACY_PART = re.compile(r"^\..+\.part-(\d+)$")
_STAGE_RE = re.compile(r"^\.euphotic-stage-(\d{8}T\d{6}Z)-(\d+)$")
#: Folders whose lock this process holds: real path -> id of the thread holding it. A command
#: that adds to a folder its own thread already holds (the steps of ``euphotic run`` after its
#: maps are committed) works under that lock instead of asking for it again.
_HELD: dict[str, int] = {}
#: Outputs that describe the whole folder, rebuilt in every commit that adds to a folder
#: holding one (so they are never stale): manifest kind -> ``module:function`` called as
#: ``function(folder, stage, outputs, added)`` before the commit (see :meth:`OutputFolder.adding`).
REBUILT_KINDS: dict[str, str] = {"report": "euphotic.report:rebuild"}


class OutputBusyError(EuphoticError):
    """Another run holds the output folder."""

    exit_code = 3


class OutputWriteError(EuphoticError):
    """Outputs could not be written (disk full, permissions, file system errors)."""


def now_iso() -> str:
    """UTC time as a full ISO 8601 timestamp (``2026-12-02T10:58:00Z``)."""
    return dt.datetime.now(dt.UTC).replace(microsecond=0).strftime("%Y-%m-%dT%H:%M:%SZ")


def _write_json_atomic(path: Path, obj, *, indent: int | None = 1) -> None:
    """Write ``obj`` as JSON to ``path`` atomically (``indent=None``: compact, written by the
    json module's C encoder, for an index rewritten often as a run goes on)."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    with open(tmp, "w") as fh:
        fh.write(json.dumps(obj, indent=indent, sort_keys=False, allow_nan=True))
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def pid_alive(pid: int) -> bool:
    """Whether a process of that id runs on this host."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_path(path: Path) -> None:
    """Delete a file or a directory tree (a Zarr store) if it exists."""
    p = Path(path)
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    elif p.exists() or p.is_symlink():
        p.unlink()


def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


# --------------------------------------------------------------------------------------------
# the lock
# --------------------------------------------------------------------------------------------


@dataclass
class Lock:
    """An exclusive ``flock`` on ``.euphotic.lock``; its text names the holder."""

    path: Path
    fd: int | None = None
    took_over: dict | None = None  # what a dead holder had written, when its lock was taken

    def acquire(self, command: str) -> None:
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise
            info = self._read()
            who = (
                f"pid {info.get('pid', '?')} on {info.get('host', '?')}, started "
                f"{info.get('started', '?')}"
                if info
                else "a process that has not yet written its details"
            )
            raise OutputBusyError(
                f"{self.path.parent}: another euphotic run ({who}) is writing to this folder; "
                "wait for it to finish or stop it, or choose another output folder"
            ) from None
        self.fd = fd
        old = self._read()
        if old and old.get("state") == "running" and old.get("pid") != os.getpid():
            # the flock is free, so its holder is gone (a kill or a crash)
            self.took_over = old
        info = {
            "tool": "euphotic",
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started": now_iso(),
            "command": command,
            "state": "running",
        }
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(info).encode(), 0)
        os.fsync(fd)

    def _read(self) -> dict | None:
        try:
            text = self.path.read_text()
            return json.loads(text) if text.strip() else None
        except (OSError, ValueError):
            return None

    def release(self) -> None:
        if self.fd is None:
            return
        info = self._read()
        if info is not None:  # None: the lock file was removed with its new, empty folder
            info.update(state="released", released=now_iso())
            with contextlib.suppress(OSError):
                os.ftruncate(self.fd, 0)
                os.pwrite(self.fd, json.dumps(info).encode(), 0)
        fcntl.flock(self.fd, fcntl.LOCK_UN)
        os.close(self.fd)
        self.fd = None


# --------------------------------------------------------------------------------------------
# stages
# --------------------------------------------------------------------------------------------


@dataclass
class Stage:
    """The staging folder of one run and the index of its finished items."""

    path: Path
    index: dict = field(default_factory=dict)

    @property
    def items(self) -> dict:
        return self.index.setdefault("items", {})

    def file(self, name: str) -> Path:
        """Where the output ``name`` is written during the run."""
        return self.path / name

    def record(self, name: str, entry: dict) -> None:
        """Mark ``name`` complete (its file is fully written) with its manifest entry."""
        self.items[name] = entry

    def save(self) -> None:
        """Persist the index: after a kill, recorded items can be reused by the next run."""
        # compact: rewritten after every batch of months, and it grows with the months
        _write_json_atomic(self.path / STAGE_INDEX, self.index, indent=None)

    @classmethod
    def load(cls, path: Path) -> Stage | None:
        """A stage folder of this tool (its index names the tool), or None."""
        try:
            index = json.loads((path / STAGE_INDEX).read_text())
        except (OSError, ValueError):
            return cls(path, {}) if _STAGE_RE.match(path.name) else None
        if index.get("tool") != "euphotic":
            return None
        return cls(path, index)


def intact(path: Path, entry: dict) -> bool:
    """An output in place is as its manifest entry recorded it (same size and modification
    time)."""
    try:
        st = stat_entry(path)
    except OSError:
        return False
    return st["bytes"] == entry.get("bytes") and st["mtime_ns"] == entry.get("mtime_ns")


def stat_entry(path: Path) -> dict:
    """Size (bytes; every file of a Zarr store) and modification time (ns) of an output, as
    the manifest records them and as readers check them."""
    p = Path(path)
    st = p.stat()
    size = sum(f.stat().st_size for f in p.rglob("*") if f.is_file()) if p.is_dir() else st.st_size
    return {"bytes": size, "mtime_ns": st.st_mtime_ns}


class OutputFolder:
    """One run's view of its output folder: lock, recovery, staging, reuse and commit."""

    def __init__(self, path: Path):
        self.path = Path(path)
        self.lock = Lock(self.path / LOCK_NAME)
        self.notes: list[str] = []

    # ---- lock -------------------------------------------------------------------------------

    @contextlib.contextmanager
    def locked(self, command: str) -> Iterator[OutputFolder]:
        """Hold the folder for one run; a second run refuses with :class:`OutputBusyError`.

        Re-entrant within one thread: when this thread already holds the folder (a command
        adding to the folder from inside ``euphotic run``), the lock is kept as it is and
        released by its first holder. Another thread or process still refuses.
        """
        key = os.path.realpath(self.path)
        if _HELD.get(key) == threading.get_ident():
            yield self
            return
        created = not self.path.exists()
        self.path.mkdir(parents=True, exist_ok=True)
        self.lock.acquire(command)
        _HELD[key] = threading.get_ident()
        try:
            if self.lock.took_over:
                o = self.lock.took_over
                log.warning(
                    "%s: taking over the lock of a run that is no longer running (pid %s on %s, "
                    "started %s)", self.path, o.get("pid"), o.get("host"), o.get("started"),
                )
            yield self
        finally:
            _HELD.pop(key, None)
            if created and [p.name for p in self.path.iterdir()] == [LOCK_NAME]:
                # a first run into a new folder that failed: leave no folder behind
                self.lock.path.unlink()
                self.lock.release()
                with contextlib.suppress(OSError):
                    self.path.rmdir()
            else:
                self.lock.release()

    # ---- what is there ----------------------------------------------------------------------

    def manifest(self) -> dict | None:
        """The committed run's manifest, or None."""
        try:
            m = json.loads((self.path / MANIFEST_NAME).read_text())
        except (OSError, ValueError):
            return None
        return m if m.get("tool") == "euphotic" else None

    def stale_stages(self) -> list[Stage]:
        """Stage folders left by runs that died (the lock is ours, so none is alive)."""
        out = []
        for p in sorted(self.path.glob(STAGE_PREFIX + "*")):
            if p.is_dir() and _STAGE_RE.match(p.name):
                st = Stage.load(p)
                if st is not None:
                    out.append(st)
        return out

    # ---- recovery ---------------------------------------------------------------------------

    def recover(self) -> list[Stage]:
        """Finish commits that a kill interrupted and remove debris of older versions.

        Returns the stale stages that were not committing: their recorded items may be reused
        (see :meth:`salvage`) and they are removed by :meth:`discard_stale`.
        """
        pending = []
        for st in self.stale_stages():
            if (st.path / COMMIT_NAME).exists():
                self._apply_commit(st.path)
                self.notes.append(f"completed the interrupted commit of an earlier run ({st.path.name})")
            else:
                pending.append(st)
        for p in self.path.iterdir():  # .NAME.part-PID files of versions before staging
            m = _LEGACY_PART.match(p.name)
            if m and not pid_alive(int(m.group(1))):
                remove_path(p)
                self.notes.append(f"removed {p.name}, left by a killed run")
        return pending

    def discard_stale(self, stages: list[Stage]) -> None:
        for st in stages:
            remove_path(st.path)
        if stages:
            self.notes.append(
                f"removed the staging folder(s) of {len(stages)} interrupted run(s)"
            )

    # ---- a new stage ------------------------------------------------------------------------

    def new_stage(self, run_info: dict) -> Stage:
        stamp = dt.datetime.now(dt.UTC).strftime("%Y%m%dT%H%M%SZ")
        path = self.path / f"{STAGE_PREFIX}{stamp}-{os.getpid()}"
        path.mkdir()
        st = Stage(path, {"tool": "euphotic", **run_info, "items": {}})
        st.save()
        return st

    # ---- commit -----------------------------------------------------------------------------

    def commit(self, stage: Stage, manifest: dict, *, keep: set[str]) -> None:
        """Put the staged outputs in place as one unit.

        ``manifest`` lists every output of the run (reused ones included); ``keep`` are the
        names already in place that the run reuses. Outputs of the previous manifest that the
        new one does not list are deleted. The manifest itself is moved last.
        """
        staged = [n for n in manifest["outputs"] if n not in keep]
        missing = [n for n in staged if not stage.file(n).exists()]
        if missing:
            raise OutputWriteError(f"{stage.path}: staged outputs missing: {', '.join(missing)}")
        for n in staged:  # every rename must be possible before the first one is made
            dst = self.path / n
            if dst.exists() and dst.is_dir() != stage.file(n).is_dir():
                kind = "a folder" if dst.is_dir() else "a file"
                raise OutputWriteError(
                    f"{dst}: cannot put the new output in place: {kind} of that name is in the way"
                )
        if not os.access(self.path, os.W_OK):
            raise OutputWriteError(f"{self.path}: the output folder is not writable")
        previous = self.manifest() or {}
        delete = sorted(set(previous.get("outputs", {})) - set(manifest["outputs"]))
        _write_json_atomic(stage.file(MANIFEST_NAME), manifest)
        plan = {"moves": staged + [MANIFEST_NAME], "deletes": delete}
        _write_json_atomic(stage.path / COMMIT_NAME, plan)
        _fsync_dir(stage.path)
        self._apply_commit(stage.path)

    def _apply_commit(self, stage_path: Path) -> None:
        """Carry out (or finish) a commit plan: idempotent, so a kill at any point is
        completed by running it again."""
        plan = json.loads((stage_path / COMMIT_NAME).read_text())
        for name in plan["moves"]:
            src, dst = stage_path / name, self.path / name
            if not src.exists():
                continue  # moved before the kill
            if src.is_dir():  # a Zarr store: a directory cannot replace a directory atomically
                old = stage_path / f".old-{name}"
                if dst.exists():
                    os.replace(dst, old)
                os.replace(src, dst)
            else:
                os.replace(src, dst)
        for name in plan["deletes"]:
            if name not in plan["moves"] and "/" not in name and not name.startswith(".."):
                remove_path(self.path / name)
        _fsync_dir(self.path)
        remove_path(stage_path)

    @contextlib.contextmanager
    def adding(self, command: str, *, replace_kinds: tuple[str, ...] = ()
               ) -> Iterator[tuple[Stage, dict]]:
        """Add outputs derived from the committed run (comparisons, figures, reports) as one
        unit, under the folder's lock.

        Yields the stage and a dict to fill with ``name -> manifest entry`` for every file the
        caller writes into the stage (each entry with a ``kind``). On success the new files are
        committed together with an updated manifest that keeps every earlier output, except
        those of a kind in ``replace_kinds`` that the caller did not write again (a new set of
        comparison tables replaces the old set). An output that describes the whole folder
        (:data:`REBUILT_KINDS`: the run report) and that the caller did not write is rebuilt
        into the same commit from what the folder will hold after it. On any failure nothing
        changes.

        Raises
        ------
        NoRunError
            The folder holds no committed run.
        """
        with self.locked(command):
            pending = self.recover()
            self.discard_stale(pending)
            previous = self.manifest()
            if previous is None:
                raise NoRunError(f"{self.path}: no euphotic run in this folder (no "
                                 f"{MANIFEST_NAME}); run `euphotic run` first")
            stage = self.new_stage({"version": previous.get("version"), "command": command,
                                    "started": now_iso()})
            added: dict[str, dict] = {}
            try:
                yield stage, added
                outputs = {n: e for n, e in previous["outputs"].items()
                           if e.get("kind") not in replace_kinds or n in added}
                self._rebuild(stage, {**outputs, **added}, added)
                for name in added:
                    added[name] = {**added[name], **stat_entry(stage.file(name))}
                outputs.update(added)
                history = list(previous.get("added", [])) + [
                    {"command": command, "time": now_iso(), "outputs": sorted(added)}]
                manifest = {**previous, "outputs": dict(sorted(outputs.items())), "added": history}
                self.commit(stage, manifest, keep=set(outputs) - set(added))
            except BaseException:
                self.abort(stage)
                raise

    def _rebuild(self, stage: Stage, outputs: dict[str, dict], added: dict[str, dict]) -> None:
        """Rebuild into ``stage`` every output of a :data:`REBUILT_KINDS` kind that the folder
        will hold after this commit and that the caller did not write itself."""
        import importlib

        for kind, target in REBUILT_KINDS.items():
            held = [n for n, e in outputs.items() if e.get("kind") == kind]
            if held and not any(n in added for n in held):
                module, func = target.split(":")
                getattr(importlib.import_module(module), func)(self.path, stage, outputs, added)

    def abort(self, stage: Stage) -> bool:
        """Remove a stage after a failure: nothing of the run is put in place. A stage whose
        commit has begun is left for the next run to complete (returns False)."""
        if (stage.path / COMMIT_NAME).exists():
            return False
        remove_path(stage.path)
        return True


def config_fingerprint(obj) -> str:
    """SHA-256 of a canonical JSON form of ``obj`` (dataclasses, paths, arrays, geometries)."""
    return hashlib.sha256(json.dumps(_canon(obj), sort_keys=True).encode()).hexdigest()


def _canon(x):
    import dataclasses

    import numpy as np

    if dataclasses.is_dataclass(x) and not isinstance(x, type):
        return {f.name: _canon(getattr(x, f.name)) for f in dataclasses.fields(x)}
    if isinstance(x, dict):
        return {str(k): _canon(v) for k, v in x.items()}
    if isinstance(x, list | tuple | set | frozenset):
        items = [_canon(v) for v in x]
        return sorted(items, key=repr) if isinstance(x, set | frozenset) else items
    if isinstance(x, Path):
        return str(x)
    if isinstance(x, np.ndarray):
        return hashlib.sha256(x.tobytes()).hexdigest()
    if isinstance(x, np.generic):
        return str(x)
    if hasattr(x, "wkb"):  # shapely geometry
        return hashlib.sha256(x.wkb).hexdigest()
    if x is None or isinstance(x, bool | int | float | str):
        return x
    return repr(x)


def file_stat(path: str | Path, base: Path | None = None) -> list:
    """Identity of an input file for fingerprints: path (relative to ``base``), size and
    modification time in nanoseconds (as make and rsync judge whether a file changed)."""
    p = Path(path)
    try:
        st = p.stat()
        ident = [st.st_size, st.st_mtime_ns]
    except OSError:
        ident = [None, None]
    name = os.path.relpath(p, base) if base is not None else str(p)
    return [name, *ident]
