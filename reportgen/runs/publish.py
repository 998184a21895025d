"""Publishing an output folder in one step, under a lock, with the signals held while it happens.

Every command that writes an output folder does it the same way::

    with publishing(out_dir, outputs) as publication:
        ...write every file into publication.staging...
        publication.commit()

An ordinary folder is staged beside itself (so on its own filesystem) and swapped in by one rename, so a
crash at any moment leaves either the previous complete folder or the new one. A mount point cannot be
renamed: it is staged inside itself and its entries are moved in one by one under a journal, which the next
run reads to roll an interrupted publish back (so there the guarantee holds from the next run on). A second
run into the same folder is refused while the first holds the lock; stale copies a killed run left are
removed by the next run that holds it. Files reportgen did not write are never deleted: the run is refused.
"""

from __future__ import annotations

import ctypes
import datetime as dt
import errno
import fcntl
import json
import os
import re
import secrets
import shlex
import shutil
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from reportgen.data import file_sha256
from reportgen.errors import OutputError
from reportgen.runs.signals import mark_published, signals_held

SUMS = "SHA256SUMS"
RUN_LOG = "run.log"
DRAWS_NC = re.compile(r"draws/[^/]+\.nc")
PLACEHOLDER = re.compile(r"\{([^{}]*)\}")
# Our own names inside a mount point (lock, journal, staging and previous copies); nothing else is ours.
MACHINERY = re.compile(r"\.reportgen(\.lock|-journal\.json(\.tmp)?|-(staging|previous)-[0-9a-f]{8})")
JOURNAL = ".reportgen-journal.json"


def resolve_out(out: Path, report_date: dt.date) -> Path:
    """``out`` with ``{date}`` (2026-11-30) and ``{period}`` (2026-11) taken from the report date."""
    values = {"date": report_date.isoformat(), "period": f"{report_date:%Y-%m}"}

    def value(match: re.Match[str]) -> str:
        if match.group(1) not in values:
            raise OutputError(f"{out}: --out holds the placeholder {match.group(0)}, which reportgen does not "
                              f"fill; use {{date}} ({values['date']}) or {{period}} ({values['period']})")
        return values[match.group(1)]

    return Path(PLACEHOLDER.sub(value, str(out)))


# ------------------------------------------------------------------------------------ places and the lock


def refuse_dangling_links(out: Path) -> None:
    """A link (``out`` or a folder above it) to a place that does not exist is refused, never created."""
    for path in (out, *out.parents):
        if path.is_symlink() and not path.exists():
            raise OutputError(f"{path}: is a symbolic link to {os.readlink(path)}, which does not exist; create "
                              "that folder first or give --out a real folder")


def is_mount_point(folder: Path) -> bool:
    """True for a mount point, bind mounts of the same filesystem included (which ``os.path.ismount``
    misses: same device, different inode), read from the kernel's mount table when there is one."""
    if os.path.ismount(folder):
        return True
    try:
        table = Path("/proc/self/mountinfo").read_text(encoding="utf-8")
    except OSError:
        return False
    points = {re.sub(r"\\([0-7]{3})", lambda m: chr(int(m.group(1), 8)), line.split()[4])
              for line in table.splitlines() if len(line.split()) > 4}
    return str(folder) in points


def _lock_path(folder: Path, inside: bool) -> Path:
    # beside the folder, since the folder itself is renamed; inside a mount point, which stays put
    return folder / ".reportgen.lock" if inside else folder.parent / f".{folder.name}.reportgen.lock"


def _holder(fd: int) -> str:
    for _ in range(20):  # the holder writes its pid just after taking the lock
        try:
            info = json.loads(os.pread(fd, 65536, 0) or b"null")
            return f"pid {info['pid']}: {shlex.join(info['command'])[:200]}"
        except (ValueError, TypeError, KeyError, OSError):
            time.sleep(0.025)
    return "pid unknown"


@contextmanager
def _locked(path: Path, out: Path) -> Iterator[None]:
    """flock on ``path``: released by the kernel when the process dies, so kill -9 leaves no stale lock.
    The file is removed on release; a process that opened it just before then finds, after locking, that
    the path now names another file (or none) and starts again, so two holders can never coexist."""
    while True:
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
        except OSError as exc:
            raise OutputError(f"{path}: cannot create the lock file ({exc.strerror}); choose another --out "
                              "folder or fix its permissions") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            holder = _holder(fd) if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN) else ""
            os.close(fd)
            if holder:
                raise OutputError(f"{out}: another reportgen run is writing this folder ({holder}); wait for it "
                                  "to finish or choose another --out folder") from None
            raise OutputError(f"{path}: cannot lock the output folder ({exc.strerror})") from None
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(path))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)
    try:
        os.ftruncate(fd, 0)
        os.write(fd, json.dumps({"pid": os.getpid(), "command": sys.argv}).encode())
        yield
    finally:
        path.unlink(missing_ok=True)  # still holding it: see the docstring
        os.close(fd)


# ------------------------------------------------------------------------------- what is ours, SHA256SUMS


def _sums_names(folder: Path) -> set[str]:
    try:
        text = (folder / SUMS).read_text(encoding="utf-8", errors="replace")
    except OSError:
        return set()
    return {match.group(1) for match in re.finditer(r"^[0-9a-f]{64} [ *](.+)$", text, re.MULTILINE)}


def _foreign(folder: Path, outputs: frozenset[str]) -> list[str]:
    """Paths in ``folder`` that reportgen did not write: not named in its SHA256SUMS, not an output name,
    not draws/*.nc and not our own lock, journal or staging names."""
    ours = _sums_names(folder) | {SUMS, RUN_LOG} | outputs
    found: list[str] = []

    def visit(directory: Path, prefix: str) -> None:
        for entry in sorted(os.scandir(directory), key=lambda e: e.name):
            relative = prefix + entry.name
            if not prefix and MACHINERY.fullmatch(entry.name):
                continue
            if entry.is_dir(follow_symlinks=False):
                before = len(found)
                visit(Path(entry.path), relative + "/")
                empty = not any(os.scandir(entry.path))
                if empty and relative != "draws" and len(found) == before:
                    found.append(relative + "/")
            elif relative not in ours and not DRAWS_NC.fullmatch(relative):
                found.append(relative)

    visit(folder, "")
    return found



def write_sums(folder: Path) -> None:
    """SHA256SUMS in the format ``sha256sum -c`` reads: every file under ``folder`` but itself, sorted."""
    paths = sorted((p.relative_to(folder).as_posix(), p) for p in folder.rglob("*") if p.is_file())
    lines = [f"{file_sha256(path)}  {name}\n" for name, path in paths if name != SUMS]
    (folder / SUMS).write_text("".join(lines), encoding="utf-8")


# ------------------------------------------------------------------------------------ moving into place


def _cause(exc: OSError, source: Path, target: Path) -> str:
    if exc.errno == errno.EXDEV:
        return f"{source} is on another filesystem than {target}, so it cannot be moved there in one step"
    if exc.errno == errno.EBUSY:
        return f"{target} is in use (a mount point, or open by another program), so it cannot be replaced"
    return f"{exc.strerror or type(exc).__name__} when moving {source} to {target}"


def _move(source: Path, target: Path) -> None:
    os.rename(source, target)


_AT_FDCWD, _RENAME_EXCHANGE = -100, 2


def _exchange(first: Path, second: Path) -> bool:
    """Swap two paths in one step (Linux renameat2 RENAME_EXCHANGE); False where the system lacks it."""
    function = getattr(ctypes.CDLL(None, use_errno=True), "renameat2", None) if sys.platform == "linux" else None
    if function is None:
        return False
    function.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    if function(_AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.EOPNOTSUPP):  # old kernel, or a filesystem without it
        return False
    raise OSError(code, os.strerror(code), str(first), None, str(second))


def _swap(staging: Path, folder: Path) -> Path | None:
    """Put ``staging`` in ``folder``'s place; the old copy's new path is returned, to be removed."""
    if not os.path.lexists(folder):
        _move(staging, folder)
        return None
    if _exchange(staging, folder):
        return staging
    previous = folder.parent / f".{folder.name}.reportgen-previous-{secrets.token_hex(4)}"
    _move(folder, previous)  # a crash between these two renames is undone by the next run (_recover)
    try:
        _move(staging, folder)
    except OSError:
        _move(previous, folder)
        raise
    return previous


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _move_in(staging: Path, folder: Path) -> Path:
    """For a mount point: move its entries aside and the new ones in, one rename each, under a journal
    written first, so the next run rolls an interrupted move back (_roll_back)."""
    previous = folder / f".reportgen-previous-{secrets.token_hex(4)}"
    previous.mkdir()
    old = sorted(name for name in os.listdir(folder) if not MACHINERY.fullmatch(name))
    new = sorted(os.listdir(staging))
    draft = folder / f"{JOURNAL}.tmp"
    draft.write_text(json.dumps({"staging": staging.name, "previous": previous.name, "old": old, "new": new}))
    _fsync(draft)
    os.replace(draft, folder / JOURNAL)
    _fsync(folder)
    try:
        for name in old:
            _move(folder / name, previous / name)
        for name in new:
            _move(staging / name, folder / name)
    except OSError:
        _roll_back(folder)
        raise
    (folder / JOURNAL).unlink()  # the commit point: from here on the new outputs stand
    _fsync(folder)
    return previous


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    else:
        path.unlink(missing_ok=True)


def _roll_back(folder: Path) -> None:
    """Undo a mount point's interrupted move: new entries already moved in go, old ones come back.

    Old entries all leave before any new one arrives, so a name the two share was replaced exactly when
    both the folder and the previous copy hold it; a name only the new run has arrived when it is there.
    """
    try:
        journal = json.loads((folder / JOURNAL).read_text(encoding="utf-8"))
    except FileNotFoundError:
        return
    except (OSError, ValueError) as exc:
        raise OutputError(f"{folder / JOURNAL}: cannot read the journal of an interrupted run ({exc}); "
                          "check the folder's contents, then remove the file") from None
    names = [*journal["new"], *journal["old"], journal["previous"]]
    if any("/" in name or name in ("", ".", "..") for name in names):
        raise OutputError(f"{folder / JOURNAL}: names a path outside the folder; remove the file")
    previous = folder / journal["previous"]
    for name in journal["new"]:
        moved_aside = name not in journal["old"] or os.path.lexists(previous / name)
        if moved_aside and os.path.lexists(folder / name):
            _remove(folder / name)
    for name in journal["old"]:
        if os.path.lexists(previous / name):
            os.rename(previous / name, folder / name)
    (folder / JOURNAL).unlink()
    _fsync(folder)


def _recover(folder: Path, inside: bool) -> None:
    """With the lock held: finish what a killed run left. Only our own names are touched."""
    if inside:
        _roll_back(folder)
        ours = re.compile(r"\.reportgen-((staging|previous)-[0-9a-f]{8}|journal\.json\.tmp)")
        leftovers = [folder / n for n in os.listdir(folder) if ours.fullmatch(n)]
    else:
        name = re.escape(folder.name)
        ours = re.compile(rf"\.{name}\.reportgen-(staging|previous)-[0-9a-f]{{8}}|\.{name}\.staging-[a-z0-9_]{{8}}")
        leftovers = [folder.parent / n for n in os.listdir(folder.parent) if ours.fullmatch(n)]
        copies = sorted((p for p in leftovers if "-previous-" in p.name), key=lambda p: p.stat().st_mtime)
        if copies and not os.path.lexists(folder):  # killed between the two renames of _swap
            os.rename(copies[-1], folder)
            leftovers.remove(copies[-1])
    for path in leftovers:
        _remove(path)


# ----------------------------------------------------------------------------------------- publication


class Publication:
    """Where a run writes its outputs (``staging``), and ``commit()``, which publishes them."""

    def __init__(self, out_dir: Path, folder: Path, staging: Path, inside: bool) -> None:
        self.out_dir, self.folder, self.staging, self.inside = out_dir, folder, staging, inside
        self.committed = False

    def commit(self) -> None:
        """Write SHA256SUMS, then replace the whole folder in one step, with Ctrl-C and SIGTERM held."""
        write_sums(self.staging)
        for path in (*self.staging.rglob("*"), self.staging):
            if path.is_file() or path.is_dir():
                _fsync(path)  # the bytes reach the disk before the rename that publishes them
        with signals_held():
            try:
                old = _move_in(self.staging, self.folder) if self.inside else _swap(self.staging, self.folder)
            except OSError as exc:
                source, target = Path(exc.filename or self.staging), Path(exc.filename2 or self.folder)
                raise OutputError(f"{self.out_dir}: could not publish the outputs: {_cause(exc, source, target)}; "
                                  "the previous outputs were left as they were") from None
            self.committed = True
            mark_published(self.out_dir)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)  # left behind by a crash here, it goes at the next run


@contextmanager
def publishing(out_dir: Path, outputs: frozenset[str]) -> Iterator[Publication]:
    """Lock ``out_dir``, check it holds only our files, clean what a killed run left, and yield a
    Publication whose staging folder is removed on leaving unless it was committed."""
    refuse_dangling_links(out_dir)
    folder = out_dir.resolve()
    if os.path.lexists(folder) and not folder.is_dir():
        raise OutputError(f"{out_dir}: --out must be a folder, and this is a file")
    inside = folder.is_dir() and is_mount_point(folder)  # cannot be renamed: staged inside, journal
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder.parent}: cannot create the folder ({exc.strerror}); choose another --out "
                          "folder or fix its permissions") from None
    with _locked(_lock_path(folder, inside), out_dir):
        _recover(folder, inside)
        try:
            foreign = _foreign(folder, outputs) if folder.is_dir() else []
        except OSError as exc:
            raise OutputError(f"{out_dir}: cannot read the folder's contents ({exc.strerror}: {exc.filename}); "
                              "fix its permissions or choose another --out folder") from None
        if foreign:
            shown = ", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if len(foreign) > 5 else "")
            raise OutputError(f"{out_dir}: holds files that reportgen did not write ({shown}); reportgen replaces "
                              "the whole folder, so move them elsewhere or choose another --out folder")
        place, prefix = (folder, ".reportgen") if inside else (folder.parent, f".{folder.name}.reportgen")
        staging = place / f"{prefix}-staging-{secrets.token_hex(4)}"
        staging.mkdir()
        try:
            yield Publication(out_dir, folder, staging, inside)
        finally:
            shutil.rmtree(staging, ignore_errors=True)
