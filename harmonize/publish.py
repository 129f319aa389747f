"""Publish a package safely: one build per output at a time, staging beside it, an atomic swap.

A scheduled build must never leave a half-written package where readers look, even when it is
killed with `kill -9`, and two builds must never write the same output at once. This module
owns the three mechanisms that promise that:

* the **output lock** `.<output>.lock` beside the output, holding the owner's pid, host, boot
  id, process start time and a random token. It is written to a draft file first and then
  hard-linked into place (link(2) fails if the lock exists), so a lock is never seen half
  written, even when its writer is killed; where the file system has no hard links it is
  created with `O_CREAT|O_EXCL` and filled. A lock whose
  owner is gone (same host and: the pid does not exist, is a zombie, was reused by a process
  started later, or the machine has rebooted since) is stale and is taken over; a lock from
  another host is never judged, only reported;
* the **staging folder** `.<output>.staging-*` beside the output, on the same file system, where
  the whole package is written and validated; leftovers of killed runs are removed by the next
  run once it holds the lock;
* the **swap**: on Linux one `renameat2(RENAME_EXCHANGE)` call exchanges the staging folder and
  the old package in a single step, so the output path always names a complete package. Where
  that call is missing (other systems, some file systems) two renames are used and the next run
  restores the previous package if a kill fell between them.

What goes into the package, and whether it is valid, is left to `package` and
`package_validate`; what changed since the last build to `changes`.

Test hook (documented, read only here): when the environment variable
`HARMONIZE_TEST_PAUSE_BEFORE_SWAP` holds a number of seconds, the swap sleeps that long after the
staging package is complete and before it is swapped in, so tests can kill a build mid-publish.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import errno
import json
import os
import secrets
import shutil
import socket
import tempfile
import time
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path

from harmonize.errors import BuildLockedError

PAUSE_BEFORE_SWAP_VARIABLE = "HARMONIZE_TEST_PAUSE_BEFORE_SWAP"
# A lock file that exists but cannot be parsed is being written right now (only possible where
# the file system has no hard links, or by a build of an older version), unless it is older than
# this: then its writer died between creating and filling it.
UNREADABLE_LOCK_GRACE_SECONDS = 10.0
_UNREADABLE_LOCK_POLL_SECONDS = 0.1
_RENAME_EXCHANGE = 2  # linux/fs.h
_AT_FDCWD = -100  # linux/fcntl.h


@dataclass(frozen=True)
class LockOwner:
    """Who holds an output lock (the lock file's content)."""

    pid: int
    host: str
    started: str  # UTC, ISO 8601
    token: str
    boot_id: str | None = None
    process_start: str | None = None  # clock ticks after boot (Linux /proc/<pid>/stat field 22)

    def describe(self) -> str:
        return f"pid {self.pid} on host {self.host}, started {self.started}"


@dataclass(frozen=True)
class HeldLock:
    path: Path
    owner: LockOwner
    taken_over: LockOwner | None  # the stale owner replaced, if any


def lock_path(output: Path) -> Path:
    return output.with_name(f".{output.name}.lock")


def _boot_id() -> str | None:
    try:
        return Path("/proc/sys/kernel/random/boot_id").read_text(encoding="ascii").strip()
    except OSError:
        return None


def _process_stat(pid: int) -> tuple[str, str] | None:
    """(state, start time in ticks) of a process from /proc, or None where /proc is missing."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text(encoding="ascii", errors="replace")
    except OSError:
        return None
    # the command name (field 2) may hold spaces and parentheses: split after its last ')'
    fields = text[text.rfind(")") + 2 :].split()
    return (fields[0], fields[19]) if len(fields) > 19 else None


def _me() -> LockOwner:
    stat = _process_stat(os.getpid())
    return LockOwner(
        pid=os.getpid(),
        host=socket.gethostname(),
        started=datetime.now(UTC).isoformat(timespec="seconds"),
        token=secrets.token_hex(8),
        boot_id=_boot_id(),
        process_start=stat[1] if stat else None,
    )


def _owner_is_gone(owner: LockOwner) -> bool:
    """True when the owner certainly no longer runs; False when alive or not knowable."""
    if owner.host != socket.gethostname():
        return False  # another machine's process cannot be checked from here
    boot = _boot_id()
    if owner.boot_id and boot and owner.boot_id != boot:
        return True  # the machine restarted since the lock was taken
    try:
        os.kill(owner.pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        pass  # exists, owned by another user
    stat = _process_stat(owner.pid)
    if stat is None:
        return False
    state, start = stat
    if state in ("Z", "X"):
        return True  # killed, waiting to be reaped: it will write nothing more
    return bool(owner.process_start) and start != owner.process_start  # pid reused


def _read_owner(path: Path) -> LockOwner | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return LockOwner(**data)
    except (OSError, ValueError, TypeError):
        return None


def _write_owner(descriptor: int, owner: LockOwner) -> None:
    with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
        handle.write(json.dumps(asdict(owner), sort_keys=True) + "\n")
        handle.flush()
        os.fsync(handle.fileno())


def _draft_path(path: Path, owner: LockOwner) -> Path:
    return path.with_name(f"{path.name}.draft-{owner.pid}-{owner.token}")


def _try_create(path: Path, owner: LockOwner) -> bool:
    """Create the lock holding `owner`, whole or not at all; False if a lock exists."""
    draft = _draft_path(path, owner)
    try:
        _write_owner(os.open(draft, os.O_CREAT | os.O_TRUNC | os.O_WRONLY, 0o644), owner)
        os.link(draft, path)
        return True
    except (FileExistsError, FileNotFoundError):
        return False  # a lock exists (a build holding it may have cleaned our draft away)
    except OSError as error:
        if error.errno not in (errno.EPERM, errno.EOPNOTSUPP, errno.ENOTSUP, errno.EMLINK):
            raise
    finally:
        draft.unlink(missing_ok=True)
    try:  # no hard links here: create and fill (a kill in between leaves an unreadable lock)
        descriptor = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
    except FileExistsError:
        return False
    _write_owner(descriptor, owner)
    return True


def _take_over(path: Path, stale: LockOwner | None, me: LockOwner) -> bool:
    """Move a stale lock aside, but only if it is still the one judged stale."""
    aside = path.with_name(f"{path.name}.stale-{me.pid}-{me.token}")
    try:
        os.rename(path, aside)
    except FileNotFoundError:
        return True  # its owner or another taker removed it: try to create ours
    moved = _read_owner(aside)
    same = (moved is None and stale is None) or (
        moved is not None and stale is not None and moved.token == stale.token
    )
    if not same:
        # between our check and the rename another build took the lock over: give it back
        with contextlib.suppress(FileExistsError, FileNotFoundError):
            os.link(aside, path)
    aside.unlink(missing_ok=True)
    return same


def acquire_lock(output: Path, *, attempts: int = 20) -> HeldLock:
    """Take the output lock or raise BuildLockedError naming its holder."""
    path = lock_path(output)
    path.parent.mkdir(parents=True, exist_ok=True)
    me = _me()
    taken_over: LockOwner | None = None
    for _ in range(attempts):
        if _try_create(path, me):
            return HeldLock(path=path, owner=me, taken_over=taken_over)
        owner = _read_owner(path)
        if owner is None:
            if _unreadable_lock_is_young(path):
                continue  # it vanished or became readable: try again
        elif not _owner_is_gone(owner):
            raise BuildLockedError(
                f"another build is writing this output ({owner.describe()})",
                file=str(output),
                hint=(
                    "wait for it to finish; if no such build runs (e.g. its host is down), "
                    f"delete {path}"
                ),
            )
        if _take_over(path, owner, me):
            taken_over = owner or taken_over
    raise BuildLockedError(
        "could not take the output lock: other builds keep taking it",
        file=str(output),
        hint=f"check for builds started in a loop; the lock file is {path}",
    )


def _unreadable_lock_is_young(path: Path) -> bool:
    """Wait while an unreadable lock is younger than the grace time; False once it is stale.

    True as soon as the lock is gone or readable, so the caller looks again. Waiting is bounded
    by the grace time, not by the caller's attempts, so a build started right after another was
    killed mid-write waits for that lock to turn stale instead of giving up.
    """
    while True:
        try:
            age = time.time() - path.stat().st_mtime
        except FileNotFoundError:
            return True
        if _read_owner(path) is not None:
            return True
        if age >= UNREADABLE_LOCK_GRACE_SECONDS:
            return False
        time.sleep(min(_UNREADABLE_LOCK_POLL_SECONDS, UNREADABLE_LOCK_GRACE_SECONDS - age))


def release_lock(lock: HeldLock) -> None:
    """Remove the lock file if it is still ours (never another build's)."""
    current = _read_owner(lock.path)
    if current is not None and current.token == lock.owner.token:
        lock.path.unlink(missing_ok=True)


@contextlib.contextmanager
def output_lock(output: Path) -> Iterator[HeldLock]:
    lock = acquire_lock(output)
    try:
        yield lock
    finally:
        release_lock(lock)


def _previous_folders(output: Path) -> list[Path]:
    return sorted(output.parent.glob(f".{output.name}.previous-*"))


def clean_leftovers(output: Path) -> tuple[str, ...]:
    """Remove what killed runs left beside the output; call only while holding the lock.

    If a run died between the two renames of the fallback swap, the output is missing and the
    previous package waits under `.<output>.previous-*`: it is put back first.
    """
    if not output.parent.is_dir():
        return ()
    removed: list[str] = []
    previous = _previous_folders(output)
    if previous and not output.exists():
        os.replace(previous[-1], output)
        removed.append(f"restored {previous[-1].name}")
        previous = previous[:-1]
    lock_name = lock_path(output).name
    patterns = (f".{output.name}.staging-*", f"{lock_name}.stale-*", f"{lock_name}.draft-*")
    leftovers = previous + [p for pattern in patterns for p in output.parent.glob(pattern)]
    for leftover in sorted(leftovers):
        if leftover.is_dir():
            shutil.rmtree(leftover, ignore_errors=True)
        else:
            leftover.unlink(missing_ok=True)
        removed.append(leftover.name)
    return tuple(removed)


def new_staging_folder(output: Path) -> Path:
    output.parent.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=f".{output.name}.staging-", dir=output.parent))


def _fsync_tree(folder: Path) -> None:
    """Flush the staging files to disk so a power cut after the swap finds complete files."""
    for path in sorted(folder.rglob("*")):
        if path.is_file():
            with open(path, "rb") as handle:
                os.fsync(handle.fileno())
    _fsync_folder(folder)


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):  # some file systems cannot open folders for syncing
        descriptor = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(descriptor)
        finally:
            os.close(descriptor)


def _exchange(first: Path, second: Path) -> bool:
    """Atomically exchange two paths (Linux renameat2); False where the call is unavailable."""
    library = ctypes.util.find_library("c")
    try:
        libc = ctypes.CDLL(library, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [
        ctypes.c_int,
        ctypes.c_char_p,
        ctypes.c_int,
        ctypes.c_char_p,
        ctypes.c_uint,
    ]
    result = renameat2(
        _AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE
    )
    if result == 0:
        return True
    error = ctypes.get_errno()
    if error in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP):  # this system cannot exchange
        return False
    raise OSError(error, os.strerror(error), str(first))


def _pause_for_tests() -> None:
    text = os.environ.get(PAUSE_BEFORE_SWAP_VARIABLE, "").strip()
    if text:
        time.sleep(float(text))


def flush_in_background(folder: Path) -> Future:
    """Start flushing a finished staging folder to disk while the build goes on (validation
    only reads it); `swap_into_place` waits for it. Flushing a large package takes seconds."""
    executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="fsync")
    flushing = executor.submit(_fsync_tree, folder)
    executor.shutdown(wait=False)
    return flushing


def swap_into_place(staging: Path, output: Path, flushing: Future | None = None) -> None:
    """Make the complete staging folder the output; the old package is removed afterwards.

    `flushing` is a flush started by `flush_in_background` once the folder was complete."""
    if flushing is not None:
        flushing.result()  # re-raises a failed flush here
    else:
        _fsync_tree(staging)
    _pause_for_tests()
    if not output.exists():
        os.replace(staging, output)  # renaming onto a missing name is atomic
    elif _exchange(staging, output):
        shutil.rmtree(staging, ignore_errors=True)  # staging now holds the old package
    else:
        previous = output.with_name(f".{output.name}.previous-{os.getpid()}")
        os.replace(output, previous)
        try:
            os.replace(staging, output)
        except OSError:
            os.replace(previous, output)
            raise
        shutil.rmtree(previous, ignore_errors=True)
    _fsync_folder(output.parent)


def write_file_atomically(path: Path, data: bytes) -> None:
    """Write beside the target and rename over it: readers see the old or the new file."""
    path.parent.mkdir(parents=True, exist_ok=True)
    descriptor, temporary = tempfile.mkstemp(
        prefix=f".{path.name}.", suffix=".tmp", dir=path.parent
    )
    try:
        with os.fdopen(descriptor, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, path)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
