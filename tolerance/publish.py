"""Publishing an output folder: whole or not at all, one writer at a time, the user's files kept.

``retol run``, ``demo``, ``report``, ``sweep``, ``design``, ``allocate`` and ``inspect`` and
:func:`tolerance.report.write_report` all write through :class:`Output` (``allocate`` and
``inspect`` by :func:`write_files`, replacing only files of their own names)::

    with Output("reports/x", force=False, replaces=RUN) as out:
        ...write files into out.part...
        out.publish()

What it promises, and how:

* **One writer per folder.**  Entering takes an exclusive ``flock`` on a lock file beside the
  target (``.NAME.lock``; inside the target when the target is a mount point) and holds it until
  the end; a second run into the same folder is refused at once, naming the run that holds it
  (its pid, start time and command).
* **Only our own files.**  Each published folder carries a manifest (``.retol-manifest.json``)
  listing the files retol wrote there.  ``--force`` replaces only those; any other file in the
  folder (even inside ``figures/``) is left alone, and a folder holding only other files does not
  "already hold results".  A folder written before manifests existed is read by name (grid.nc,
  summary.csv, report.html and the figure files retol draws).
* **All or nothing.**  Everything is built in a part folder on the target's file system (beside
  the target, or inside it when the target is a mount point), so the final moves are renames.
  A new target arrives in one rename.  Into an existing folder, the previous outputs are first
  moved aside into the part folder (kept until the new ones are all in place), then the new ones
  are moved in, with SIGINT, SIGTERM and SIGHUP held back for those few renames; a journal
  written first lets the next run roll back a publish cut short by SIGKILL or a power loss.
* **Signals.**  SIGTERM and SIGHUP stop a run like Ctrl-C does (:class:`Terminated`, exit
  128 + signal number, so 143 for SIGTERM); the part folder is removed on the way out.  Part
  folders left by a killed run are removed by the next run into the same folder, which says so.
* **Writable before the work.**  The part folder is made when entering, before any long job,
  so a read-only or missing place fails at once.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import secrets
import shutil
import signal
import socket
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from .errors import RetolError

MANIFEST = ".retol-manifest.json"
JOURNAL = ".retol-journal.json"
OWNER = ".retol-owner.json"
#: Name of the part folder when it lives inside a target that is a mount point.
INSIDE_PART = ".retol-part-"
#: Our bookkeeping files: never listed as outputs, never counted as the user's.
BOOKKEEPING = (MANIFEST, JOURNAL, OWNER)

GRID_FILE = "grid.nc"
SUMMARY_FILE = "summary.csv"
REPORT_FILE = "report.html"
FIGURE_DIR = "figures"

#: Targets published by this process (so an interrupt message can say what was written).
PUBLISHED: list[Path] = []

_HELD = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


class Terminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP received: stop like Ctrl-C; the exit status is 128 + ``signum``."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


# ----------------------------------------------------------------------------- what is whose


def run_outputs(rel: str) -> bool:
    """What ``retol run`` replaces: every file retol wrote in the folder."""
    return True


def report_outputs(rel: str) -> bool:
    """What a report replaces: report.html, summary.csv and figures/ (the grid stays)."""
    return rel != GRID_FILE


RUN = run_outputs
REPORT = report_outputs

#: What ``retol allocate`` and ``retol inspect`` (one plate, a lot) write; each replaces only its
#: own files, so they may share a folder with a run's results.
ALLOCATE_FILES = ("allocation.json", "drawing.csv", "yield_vs_width.png", "allocation.html")
INSPECT_FILES = ("inspection.json", "as_built.toml", "fit.png", "fit.csv")
LOT_FILES = ("lot.csv", "lot.png", "lot.json")


def only(names):
    """What an output replaces when it writes just the files ``names``."""
    names = frozenset(names)

    def replaces(rel: str) -> bool:
        return rel in names

    return replaces


def _figure_files() -> set[str]:
    """Every figure file retol can draw, for folders written before manifests existed."""
    from .plots import FIGURES, FORMATS

    return {f"{FIGURE_DIR}/{n}.{f}" for n in FIGURES for f in FORMATS}


def _possible_outputs() -> set[str]:
    fixed = {GRID_FILE, SUMMARY_FILE, REPORT_FILE, *ALLOCATE_FILES, *INSPECT_FILES, *LOT_FILES}
    return fixed | _figure_files()


def _read_manifest(folder: Path) -> dict | None:
    try:
        data = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
        files = data["files"]
        if isinstance(files, list) and all(isinstance(f, str) for f in files):
            return data
    except (OSError, ValueError, KeyError, TypeError):
        pass
    return None


def ours(folder: Path) -> list[str]:
    """Files (relative, with ``/``) in ``folder`` that retol wrote and that are still there.

    From the folder's manifest; a folder without one is read by name (grid.nc, summary.csv,
    report.html and retol's figure files).
    """
    data = _read_manifest(folder)
    names = data["files"] if data is not None else sorted(_possible_outputs())
    out = []
    for rel in names:
        if ".." in Path(rel).parts or Path(rel).is_absolute() or rel in BOOKKEEPING:
            continue  # a tampered manifest never makes us touch anything outside the folder
        p = folder / rel
        if p.is_file() and not p.is_symlink():
            out.append(rel)
    return out


def _owner_text(info: dict) -> str:
    parts = []
    if info.get("pid"):
        parts.append(f"pid {info['pid']}")
    if info.get("host") and info["host"] != socket.gethostname():
        parts.append(f"on {info['host']}")
    if info.get("started"):
        parts.append(f"started {info['started']}")
    text = ", ".join(parts)
    if info.get("command"):
        text += f": {info['command']}"
    return text or "details unknown"


def _now() -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S")


def _size(path: Path) -> int:
    total = 0
    for root, _, files in os.walk(path):
        for f in files:
            with contextlib.suppress(OSError):
                total += os.lstat(os.path.join(root, f)).st_size
    return total


def _mb(n: int) -> str:
    return f"{n / 1e6:.1f} MB" if n >= 1e5 else f"{n / 1e3:.0f} kB"


def _note(text: str) -> None:
    print(f"retol: note: {text}", file=sys.stderr)


# ----------------------------------------------------------------------------- the lock


class _Lock:
    """An exclusive ``flock`` on ``path``, with the holder's details written in the file.

    The holder removes the file before it lets go; a process that locked a file since removed
    (or replaced) tries again, so two processes never both believe they hold it.
    """

    def __init__(self, path: Path, info: dict, target: Path, field: str):
        import fcntl

        self.path = path
        while True:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                other = b""
                with contextlib.suppress(OSError):
                    other = os.pread(fd, 4096, 0)
                os.close(fd)
                if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise
                try:
                    held = _owner_text(json.loads(other.decode("utf-8")))
                except ValueError:
                    held = "details not written yet"
                raise RetolError(
                    field,
                    f"{str(target)!r} is in use by another retol run ({held})",
                    "wait for it to finish, or choose another --out",
                ) from None
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(path))
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        self.fd = fd
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(info).encode("utf-8"), 0)

    def release(self):
        with contextlib.suppress(OSError):
            os.unlink(self.path)
        os.close(self.fd)


# ----------------------------------------------------------------------------- signals


@contextlib.contextmanager
def terminate_as_interrupt():
    """SIGTERM and SIGHUP raise :class:`Terminated` (like SIGINT raises KeyboardInterrupt).

    Only in the main thread (elsewhere Python cannot install handlers; nothing is changed).
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise Terminated(signum)

    old = {s: signal.signal(s, handler) for s in (signal.SIGTERM, signal.SIGHUP)}
    # a file-size limit (ulimit -f) must give an EFBIG error we can report, not kill us
    old_xfsz = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        signal.signal(signal.SIGXFSZ, old_xfsz)


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT, SIGTERM and SIGHUP back for a few renames; they take effect afterwards.

    Python runs signal handlers in the main thread whichever thread the signal reached (numba's
    worker threads included), so swapping the handlers defers them; a thread signal mask would
    not, since the kernel may deliver the signal to another thread.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending = []

    def defer(signum, frame):
        pending.append(signum)

    old = {s: signal.signal(s, defer) for s in _HELD}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if pending:
            signum = pending[0]
            handler = old[signum]
            if callable(handler):
                handler(signum, None)
            elif handler == signal.SIG_DFL:
                signal.raise_signal(signum)


# ----------------------------------------------------------------------------- moves


def _files(folder: Path) -> list[str]:
    """Every file under ``folder`` (relative, ``/``-separated), bookkeeping files left out."""
    out = []
    for root, dirs, files in os.walk(folder):
        dirs.sort()
        for f in sorted(files):
            rel = Path(root, f).relative_to(folder).as_posix()
            if rel not in BOOKKEEPING:
                out.append(rel)
    return out


def _apply_umask(folder: Path) -> None:
    """Give files made private by ``mkstemp`` the modes the user's umask gives new files."""
    mask = os.umask(0)
    os.umask(mask)
    for root, dirs, files in os.walk(folder):
        for d in dirs:
            os.chmod(os.path.join(root, d), 0o777 & ~mask)
        for f in files:
            os.chmod(os.path.join(root, f), 0o666 & ~mask)


def _move(src: Path, dst: Path) -> None:
    dst.parent.mkdir(parents=True, exist_ok=True)
    os.rename(src, dst)


def _prune(folder: Path, rels) -> None:
    """Remove the folders of ``rels`` under ``folder`` that are now empty (never ``folder``)."""
    dirs = {Path(r).parent for r in rels} - {Path(".")}
    for d in sorted(dirs, key=lambda d: len(d.parts), reverse=True):
        with contextlib.suppress(OSError):
            (folder / d).rmdir()


def _write_json(path: Path, data: dict) -> None:
    with open(path, "w", encoding="utf-8") as f:
        json.dump(data, f, indent=1)
        f.flush()
        os.fsync(f.fileno())


def roll_back(part: Path) -> bool:
    """Undo the publish a killed process left half done in ``part`` (from its journal).

    The new files already moved into the target go back to the part folder, the previous ones
    come back from it.  Returns whether there was anything to undo.
    """
    try:
        j = json.loads((part / JOURNAL).read_text(encoding="utf-8"))
        target = Path(j["target"])
        old, new = list(j["old"]), list(j["new"])
    except (OSError, ValueError, KeyError, TypeError):
        return False
    aside = part / ".old"
    for rel in new:
        if not (part / rel).exists() and (target / rel).is_file():
            _move(target / rel, part / rel)
    for rel in old:
        if (aside / rel).exists() and not (target / rel).exists():
            _move(aside / rel, target / rel)
    _prune(target, new)
    return True


# ----------------------------------------------------------------------------- Output


@dataclass(frozen=True)
class Plan:
    """Where a target's part folder and lock file go."""

    target: Path
    inside: bool  # the part folder lives inside the target (a mount point)

    @property
    def lock(self) -> Path:
        if self.inside:
            return self.target / ".retol.lock"
        return self.target.parent / f".{self.target.name}.lock"

    def part_prefix(self) -> tuple[Path, str]:
        if self.inside:
            return self.target, INSIDE_PART
        return self.target.parent, f".{self.target.name}.part-"

    def stale_parts(self) -> list[Path]:
        where, prefix = self.part_prefix()
        found = []
        with contextlib.suppress(OSError):
            for p in where.iterdir():
                # ".NAME.partial-" is where earlier versions built a report
                old_report = p.name.startswith(f".{self.target.name}.partial-")
                if (p.name.startswith(prefix) or old_report) and p.is_dir():
                    found.append(p)
        return sorted(found)


def plan(target: Path) -> Plan:
    """Stage beside the target, unless the target is on another file system than its parent."""
    if target.is_dir():
        try:
            inside = os.stat(target).st_dev != os.stat(target.parent).st_dev
        except OSError:
            inside = False
        return Plan(target, inside)
    return Plan(target, False)


def check_target(folder, force: bool = False, replaces=RUN, field: str = "--out") -> Path:
    """Check ``folder`` can take new outputs; return it as an absolute, resolved path.

    Raises
    ------
    RetolError
        Naming ``field``: the path is a file; it holds outputs of an earlier retol run that this
        one would replace (fix: ``--force`` or another folder); a file of the user's has the
        name of one retol writes; or the nearest existing folder is not writable.
    """
    target = Path(folder).expanduser().absolute()
    with contextlib.suppress(OSError):
        target = target.resolve()
    if target.exists() and not target.is_dir():
        raise RetolError(field, f"{str(target)!r} is a file, not a folder", "give a folder path")
    if target.is_dir():
        mine = [r for r in ours(target) if replaces(r)]
        if mine and not force:
            shown = sorted({r.split("/")[0] + ("/" if "/" in r else "") for r in mine})
            raise RetolError(
                field,
                f"{str(target)!r} already holds results of an earlier retol run "
                f"({', '.join(shown)})",
                "use --force or another folder; --force keeps files retol did not write",
            )
        own = set(ours(target))
        if (target / FIGURE_DIR).exists() and not (target / FIGURE_DIR).is_dir():
            clash = [FIGURE_DIR]
        else:
            clash = sorted(
                r
                for r in _possible_outputs()
                if replaces(r) and r not in own and (target / r).exists()
            )
        if clash:
            raise RetolError(
                field,
                f"{str(target / clash[0])!r} is not a file retol wrote, but retol would write "
                "one of that name",
                "move or rename it, or choose another folder",
            )
    ancestor = target if target.is_dir() else target.parent
    while not ancestor.exists() and ancestor != ancestor.parent:
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise RetolError(
            field, f"cannot create {str(target)!r}: {str(ancestor)!r} is a file", "choose another"
        )
    if not os.access(ancestor, os.W_OK | os.X_OK):
        raise RetolError(field, f"cannot write in {str(ancestor)!r}", "choose a writable folder")
    return target


class Output:
    """An output folder being written: lock, part folder, publish.

    Parameters
    ----------
    folder : str or Path
        The target folder.
    force : bool
        Replace earlier outputs of the kind ``replaces`` names.
    replaces : callable(str) -> bool
        Which of the target's retol files this output replaces (:data:`RUN`, :data:`REPORT`).
    command : str, optional
        Shown to a second run that finds the folder busy, and kept in the manifest.
    field : str
        The option named in errors.
    """

    def __init__(self, folder, force=False, replaces=RUN, command=None, field="--out"):
        self.force = bool(force)
        self.replaces = replaces
        self.field = field
        self.target = check_target(folder, self.force, replaces, field)
        self.info = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started": _now(),
            "command": command or " ".join(["retol"] + sys.argv[1:]),
        }
        self.published = False
        self.part: Path | None = None
        self._lock: _Lock | None = None
        self._signals = None

    # -- entering: lock, stale part folders, part folder, signals

    def __enter__(self) -> Output:
        self._signals = terminate_as_interrupt()
        self._signals.__enter__()
        try:
            self._enter()
        except BaseException:
            self._leave()
            raise
        return self

    def _enter(self):
        p = plan(self.target)
        try:
            (self.target if p.inside else self.target.parent).mkdir(parents=True, exist_ok=True)
            self._lock = _Lock(p.lock, self.info, self.target, self.field)
        except OSError as exc:
            raise self._error("cannot write in", p.lock.parent, exc) from None
        self._clean_stale(p)
        # re-check now that no other run can change the folder under us
        self.target = check_target(self.target, self.force, self.replaces, self.field)
        where, prefix = p.part_prefix()
        try:
            part = where / f"{prefix}{secrets.token_hex(4)}"
            part.mkdir()
            self.part = part
            _write_json(part / OWNER, self.info)
        except OSError as exc:
            raise self._error("cannot write in", where, exc) from None
        if self.target.is_dir() and not p.inside:
            if os.stat(part).st_dev != os.stat(self.target).st_dev:  # e.g. a bind mount
                raise RetolError(
                    self.field,
                    f"{str(self.target)!r} is on another file system than its parent folder",
                    "give a folder inside it, or a new folder",
                )
            if not os.access(self.target, os.W_OK | os.X_OK):
                raise RetolError(
                    self.field, f"cannot write in {str(self.target)!r}", "choose another folder"
                )
        self.plan = p

    def _clean_stale(self, p: Plan) -> None:
        """Part folders for this target now are leftovers: any live run would hold the lock."""
        for stale in p.stale_parts():
            who = ""
            with contextlib.suppress(OSError, ValueError):
                who = " of " + _owner_text(json.loads((stale / OWNER).read_text("utf-8")))
            undone = roll_back(stale)
            size = _size(stale)
            shutil.rmtree(stale, ignore_errors=True)
            text = (
                f"removed {stale.name} ({_mb(size)}), left by an earlier retol run{who} "
                "that was stopped before it finished"
            )
            if undone:
                text += f"; the previous results in {self.target} were restored"
            _note(text)

    # -- publishing

    def publish(self) -> Path:
        """Move the part folder's files into the target, all or nothing; return the target."""
        if self.part is None or self.published:
            raise RuntimeError("publish() outside the with block, or twice")
        new = _files(self.part)
        try:
            _apply_umask(self.part)
            self._publish(new)
        except OSError as exc:
            if self.part is not None and (self.part / JOURNAL).exists():
                with _signals_held():
                    roll_back(self.part)
            raise self._error("cannot move the results into", self.target, exc) from None
        return self.target

    def _done(self) -> None:
        # called with signals held, so that an interrupt arriving now is told the truth
        self.published = True
        PUBLISHED.append(self.target)

    def _publish(self, new: list[str]) -> None:
        part, target = self.part, self.target
        kept = []
        if target.is_dir():
            check_target(target, self.force, self.replaces, self.field)  # nothing slipped in
            kept = [r for r in ours(target) if not self.replaces(r)]
        manifest = {
            "written_by": "retol",
            **self.info,
            "finished": _now(),
            "files": sorted(set(kept) | set(new)),
        }
        _write_json(part / MANIFEST, manifest)
        for d in (os.open(part, os.O_RDONLY),):
            os.fsync(d)
            os.close(d)
        if not target.exists():
            (part / OWNER).unlink()
            with _signals_held():
                os.rename(part, target)
                self.part = None
                self._done()
            return
        old = [r for r in ours(target) if self.replaces(r)]
        if (target / MANIFEST).exists():
            old.append(MANIFEST)
        moving = new + [MANIFEST]
        _write_json(part / JOURNAL, {"target": str(target), "old": old, "new": moving})
        aside = part / ".old"
        with _signals_held():
            for rel in old:
                _move(target / rel, aside / rel)
            _prune(target, old)
            for rel in moving:
                _move(part / rel, target / rel)
            (part / JOURNAL).unlink()
            self._done()

    # -- leaving

    def __exit__(self, *exc) -> None:
        self._leave()

    def _leave(self):
        if self.part is not None:
            shutil.rmtree(self.part, ignore_errors=True)
            self.part = None
        if self._lock is not None:
            self._lock.release()
            self._lock = None
        if self._signals is not None:
            self._signals.__exit__(None, None, None)
            self._signals = None

    def _error(self, what: str, where: Path, exc: OSError) -> RetolError:
        return write_error(exc, self.field, f"{what} {str(where)!r}")


def interrupt_message(exc: KeyboardInterrupt) -> tuple[str, int]:
    """The one line and exit status for an interrupt, true to what was written."""
    if isinstance(exc, Terminated):
        name, code = signal.Signals(exc.signum).name, 128 + exc.signum
        what = f"stopped by {name}"
    else:
        what, code = "interrupted", 130
    if PUBLISHED:
        return f"{what} after writing {', '.join(map(str, PUBLISHED))}", code
    return f"{what}; nothing was written (earlier results, if any, are unchanged)", code


def write_error(exc: OSError, field: str, what: str) -> RetolError:
    """A one-line error for an OSError met while writing outputs (``what`` failed)."""
    reason = exc.strerror or str(exc)
    fix = "choose a folder you can write to"
    if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        fix = "free some space (or raise the file-size limit), or choose another --out"
    return RetolError(field, f"{what} ({reason})", fix)


def write_files(folder, files: dict, force: bool = False, command=None, field="--out") -> Path:
    """Publish the files ``{name: writer(path)}`` into ``folder`` through :class:`Output`.

    Only files of those names are replaced (with ``force``); the folder's other files, a run's
    results among them, stay.  Returns the target folder.
    """
    with Output(folder, force=force, replaces=only(files), command=command, field=field) as o:
        for name, write in files.items():
            try:
                write(o.part / name)
            except OSError as exc:
                raise write_error(exc, field, f"cannot write {name} for {o.target}") from None
        return o.publish()

