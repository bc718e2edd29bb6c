"""Where a run writes: output folders that cannot hurt anything the user holds.

The rules, checked before any analysis and again at the final move:

1. ``out`` must not be an input file, hold an input, be an ancestor of an input, be the
   current folder or one of its ancestors, be a file or be a symbolic link; its parent must
   be a folder this process can write in (the staging folder is really created there).
2. An existing folder is used only when it is empty or, with ``force``, when it is the output
   of an earlier ``cohort run``: it holds a ``manifest.json`` written by cohort and nothing
   but the files that manifest lists. Anything else is refused, with or without ``force``.
3. From the first check to the final move a run holds an exclusive lock (``flock``) on
   ``.<name>.cohort-lock`` beside ``out``: a second run on the same folder is refused at once.
4. Everything is written into a hidden staging folder beside ``out``
   (``.<name>.cohort-partial-*``) and moved into place by one ``rename``, which fails rather
   than replace a folder that appeared during the run with something in it.
5. An earlier output replaced with ``force`` is moved aside, then the files its manifest
   lists are removed one by one; anything else found in it by then is kept in a visible
   folder ``<name>.kept-<time>``, never deleted.

An interrupted run (an exception, ``SIGINT``, ``SIGTERM``, ``SIGHUP``) removes its staging
folder, the lock and the parent folders it created, and leaves ``out`` as it was.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import signal
import sys
import tempfile
import threading
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path, PurePosixPath

MARKER = "manifest.json"
"""The file by which an earlier run's output folder is recognised (with ``"tool": "cohort"``
and the list of the files it wrote)."""

try:  # POSIX: a lock the kernel releases when the process dies, so no lock is ever stale
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None  # type: ignore[assignment]


class OutputFolderError(Exception):
    """``out`` cannot be written safely; the message says why and what to do."""


class OutputExistsError(OutputFolderError, FileExistsError):
    """``out`` exists and holds files (an earlier cohort output without ``force``, or files
    cohort did not write)."""


class RunInterrupted(KeyboardInterrupt):
    """The run received ``SIGTERM`` or ``SIGHUP``; like ``KeyboardInterrupt`` for ``SIGINT``."""

    def __init__(self, signum: int) -> None:
        self.signum = signum
        super().__init__(f"interrupted by {signal.Signals(signum).name}")


_RECEIVED: list[int] = []
"""Signals received while a run was writing (a handler's exception can be swallowed where
Python ignores exceptions, e.g. in fork hooks; this record is not)."""


_ENDING = ("SIGTERM", "SIGHUP")
"""Signals that end a process (besides SIGINT, which a terminal sends to the whole group)."""
_HANDLED = ("SIGINT", *_ENDING)


def raise_if_interrupted() -> None:
    """Raise :class:`RunInterrupted` if a signal arrived while a destination was open."""
    if _RECEIVED:
        raise RunInterrupted(_RECEIVED[0])


def _real(path: str | Path) -> Path:
    return Path(os.path.realpath(path))


def _created_parents(path: Path) -> list[Path]:
    """Ancestors of ``path`` that do not exist yet, deepest first."""
    missing = []
    parent = path.parent
    while not parent.exists():
        missing.append(parent)
        parent = parent.parent
    return missing


def _check_creatable(path: Path, what: str) -> None:
    """Refuse ``path`` when the nearest existing ancestor is a file, not a folder."""
    missing = _created_parents(path)
    ancestor = (missing[-1] if missing else path).parent
    if not ancestor.is_dir():
        raise OutputFolderError(f"cannot create {what}: {str(ancestor)!r} is a file")


def _manifest_outputs(folder: Path) -> set[str] | None:
    """The files listed by a cohort manifest in ``folder``; ``None`` without one, or when an
    entry is not a plain relative path inside the folder (absolute, ``..``, empty): such a
    manifest was not written by cohort, and its list must never steer a deletion."""
    try:
        manifest = json.loads((folder / MARKER).read_text(encoding="utf-8"))
        listed = manifest["outputs"]
        if manifest.get("tool") != "cohort" or not isinstance(listed, list):
            return None
    except (OSError, ValueError, KeyError, TypeError):
        return None
    entries = set()
    for entry in listed:
        if not isinstance(entry, str) or not entry or "\\" in entry:
            return None
        parts = PurePosixPath(entry).parts
        if PurePosixPath(entry).is_absolute() or any(p in ("", ".", "..") for p in parts):
            return None
        entries.add(PurePosixPath(*parts).as_posix())
    return entries


def foreign_entries(folder: Path) -> list[str]:
    """What ``folder`` holds that an earlier ``cohort run`` did not write there: every file
    not listed by its manifest, every folder that holds no listed file, and every link (all
    of it when there is no usable manifest)."""
    listed = _manifest_outputs(folder)
    if listed is None:
        return sorted(p.name for p in folder.iterdir())
    implied = {p.as_posix() for entry in listed for p in PurePosixPath(entry).parents}
    foreign = []
    for root, dirs, files in os.walk(folder):
        base = Path(root).relative_to(folder).as_posix()
        prefix = "" if base == "." else base + "/"
        for name in dirs:
            relative = prefix + name
            if (Path(root) / name).is_symlink() or relative not in implied:
                foreign.append(relative)
        for name in files:
            relative = prefix + name
            if relative not in listed or (Path(root) / name).is_symlink():
                foreign.append(relative)
    return sorted(foreign)


def check_destination(
    out: str | Path,
    inputs: Iterable[str | Path | None] = (),
    *,
    force: bool = False,
) -> Path:
    """Check ``out`` against rules 1 and 2 of the module docstring; return it as an absolute
    path, or raise :class:`OutputFolderError` (:class:`OutputExistsError` for a folder that
    holds files) saying why.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> base = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (base / "values.csv").write_text("subject\\n")
    >>> try:
    ...     check_destination(base, [base / "values.csv"])
    ... except OutputFolderError as exc:
    ...     print("refused:", "holds the input" in str(exc))
    refused: True
    """
    given = str(out)
    out = Path(os.path.abspath(out))
    if os.path.islink(out):
        raise OutputFolderError(
            f"output folder {given!r} is a symbolic link; give the real folder instead"
        )
    real = _real(out)
    cwd = _real(Path.cwd())
    if real == cwd or cwd.is_relative_to(real):
        raise OutputFolderError(
            f"output folder {given!r} is the current folder or contains it; give a new "
            "folder, e.g. --out cohort-report"
        )
    for path in inputs:
        if path is None:
            continue
        source = _real(path)
        if source == real:
            raise OutputFolderError(f"output folder {given!r} is the input file {str(path)!r}")
        if source.is_relative_to(real):
            raise OutputFolderError(
                f"output folder {given!r} holds the input {str(path)!r}; "
                "write the report to a folder of its own"
            )
    if out.exists() and not out.is_dir():
        raise OutputFolderError(f"output folder {given!r} is a file, not a folder")
    _check_creatable(out, repr(given))
    if out.is_dir() and any(out.iterdir()):
        foreign = foreign_entries(out)
        if foreign:
            shown = ", ".join(repr(s) for s in foreign[:3])
            more = f" and {len(foreign) - 3} more" if len(foreign) > 3 else ""
            raise OutputExistsError(
                f"output folder {given!r} holds files that cohort did not write ({shown}"
                f"{more}); cohort replaces only a folder written by an earlier cohort run, "
                "and nothing in it: give a new folder"
            )
        if not force:
            raise OutputExistsError(
                f"output folder {given!r} holds an earlier cohort output; give --force to "
                "replace it, or a new folder"
            )
    return out


def _lock(path: Path, out: Path) -> int:
    """Open and lock ``path`` (the lock of ``out``) exclusively without waiting; the open
    descriptor."""
    nofollow = getattr(os, "O_NOFOLLOW", 0)
    while True:
        if path.is_symlink() or (path.exists() and not _looks_like_lock(path)):
            raise OutputFolderError(
                f"{str(path)!r} exists and is not a cohort lock file; cohort locks the output "
                "folder with that name and leaves it alone: move it or choose another folder"
            )
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT | nofollow, 0o600)
        except OSError as exc:
            if exc.errno == errno.ELOOP:  # a link appeared meanwhile
                raise OutputFolderError(f"{str(path)!r} is a link; it is left alone") from None
            raise
        if fcntl is None:  # pragma: no cover - Windows: the lock file's existence is the lock
            return fd
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                raise OutputFolderError(
                    f"another cohort run is writing to {str(out)!r} (it holds {str(path)!r}); "
                    "wait for it or choose another folder"
                ) from None
            raise
        # the previous holder may have removed the file between our open and our lock
        try:
            if os.path.samestat(os.fstat(fd), os.stat(path)):
                os.ftruncate(fd, 0)
                os.write(fd, f"{os.getpid()}\n".encode())
                return fd
        except FileNotFoundError:
            pass
        os.close(fd)


def _looks_like_lock(path: Path) -> bool:
    """An existing lock file of an earlier run: empty or one process number, a plain file."""
    try:
        if not path.is_file() or path.stat().st_size > 32:
            return False
        text = path.read_text(encoding="ascii")
    except (OSError, UnicodeDecodeError):
        return False
    return text == "" or text.strip().isdigit()


def _unlock(path: Path, fd: int) -> None:
    try:
        path.unlink(missing_ok=True)  # while still holding it (see _lock)
    finally:
        os.close(fd)


def _remove_listed(folder: Path, files: list[str]) -> bool:
    """Remove the listed files (plain files whose real path lies inside ``folder``: never
    through a link), then the folders left empty; whether ``folder`` is gone."""
    inside = _real(folder)
    for name in files:
        path = folder / name
        if path.is_file() and not path.is_symlink() and _real(path).is_relative_to(inside):
            path.unlink()
    for root, _, _ in sorted(os.walk(folder), key=lambda w: -len(w[0])):
        try:
            os.rmdir(root)
        except OSError:
            pass
    return not folder.exists()


class Destination:
    """An output folder being written: the lock, the staging folder, the final move.

    Use :func:`writing_to`; write into :attr:`staging`, then call :meth:`publish`.
    """

    def __init__(self, out: Path, inputs: list[str | Path | None], force: bool) -> None:
        self.out = out
        self.inputs = inputs
        self.force = force
        self.staging: Path | None = None
        self.kept: Path | None = None
        self._created = _created_parents(out)
        self._lock_path = out.parent / f".{out.name}.cohort-lock"
        self._fd: int | None = None

    def open(self) -> Path:
        try:
            self.out.parent.mkdir(parents=True, exist_ok=True)
            self._fd = _lock(self._lock_path, self.out)
            check_destination(self.out, self.inputs, force=self.force)  # again, now locked
            self.staging = Path(
                tempfile.mkdtemp(prefix=f".{self.out.name}.cohort-partial-", dir=self.out.parent)
            )
        except OutputFolderError:
            self.close(success=False)
            raise
        except OSError as exc:
            self.close(success=False)
            raise OutputFolderError(
                f"cannot write in {str(self.out.parent)!r}: {exc.strerror or exc}"
            ) from None
        except BaseException:
            self.close(success=False)
            raise
        return self.staging

    def publish(self) -> Path:
        """Move the finished staging folder to ``out`` (rules 4 and 5)."""
        if self.staging is None:
            raise RuntimeError("publish() needs an open destination with a staging folder")
        raise_if_interrupted()
        with _signals_held():
            return self._publish()

    def _publish(self) -> Path:
        out = self.out
        check_destination(out, self.inputs, force=self.force)
        aside = None
        if out.is_dir() and any(out.iterdir()):
            listed = _manifest_outputs(out) or set()
            aside = Path(tempfile.mkdtemp(prefix=f".{out.name}.cohort-old-", dir=out.parent))
            os.rename(out, aside / "previous")
        try:
            os.rename(self.staging, out)  # replaces nothing but an empty folder
        except OSError as exc:
            if aside is not None and not out.exists():
                os.rename(aside / "previous", out)
                os.rmdir(aside)
            raise OutputExistsError(
                f"output folder {str(out)!r} appeared or changed during the run "
                f"({exc.strerror}); it was left as it is and this run's results were not kept"
            ) from None
        self.staging = None
        if aside is not None:
            if _remove_listed(aside / "previous", sorted(listed)):
                os.rmdir(aside)
            else:
                stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%S")
                self.kept = out.with_name(f"{out.name}.kept-{stamp}")
                os.rename(aside / "previous", self.kept)
                os.rmdir(aside)
        return out

    def close(self, *, success: bool) -> None:
        if self.staging is not None:
            shutil.rmtree(self.staging, ignore_errors=True)
            self.staging = None
        if self._fd is not None:
            _unlock(self._lock_path, self._fd)
            self._fd = None
        if not success:
            for folder in self._created:  # deepest first; only while still empty
                try:
                    folder.rmdir()
                except OSError:
                    break


@contextmanager
def _signals_held() -> Iterator[None]:
    """Hold SIGINT, SIGTERM and SIGHUP back (POSIX) while the folders are swapped, so that the
    swap is never left half done; a signal that arrived meanwhile is delivered afterwards."""
    held = {getattr(signal, n) for n in _HANDLED if hasattr(signal, n)}
    mask = getattr(signal, "pthread_sigmask", None)
    if mask is None or threading.current_thread() is not threading.main_thread():
        yield  # pragma: no cover - not POSIX
        return
    previous = mask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        mask(signal.SIG_SETMASK, previous)


@contextmanager
def writing_to(
    out: str | Path, inputs: Iterable[str | Path | None] = (), *, force: bool = False
) -> Iterator[Destination]:
    """Check ``out``, lock it and give a :class:`Destination` with an empty staging folder.

    On leaving, the staging folder (when not published), the lock and the parent folders
    created for ``out`` (when nothing was published) are removed, whatever happened;
    ``SIGTERM`` and ``SIGHUP`` raise :class:`RunInterrupted` meanwhile (main thread only).
    """
    inputs = list(inputs)
    checked = check_destination(out, inputs, force=force)
    destination = Destination(checked, inputs, force)
    with _interruptible():
        destination.open()
        try:
            yield destination
        finally:
            destination.close(success=destination.staging is None)


def _interrupt(signum, frame):
    _RECEIVED.append(signum)
    raise RunInterrupted(signum)


def _in_forked_child() -> None:
    """A process forked during a run (a worker) must not run the parent's cleanup: SIGTERM
    and SIGHUP end it at once, and SIGINT (sent by a terminal to the whole process group)
    is left to the parent, which ends its workers."""
    _RECEIVED.clear()
    for name, action in (("SIGINT", signal.SIG_IGN), *((n, signal.SIG_DFL) for n in _ENDING)):
        signum = getattr(signal, name, None)
        if signum is not None and signal.getsignal(signum) is _interrupt:
            signal.signal(signum, action)


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_in_forked_child)


@contextmanager
def _interruptible() -> Iterator[None]:
    """Turn ``SIGINT``, ``SIGTERM`` and ``SIGHUP`` into :class:`RunInterrupted` (and a record
    that :func:`raise_if_interrupted` reads) so that cleanup runs; a signal that is ignored
    stays ignored. Where Python cannot raise the exception (it arrived in a fork hook or a
    finaliser), it is not printed: the record raises it again at the next stage."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    signums = [getattr(signal, n) for n in _HANDLED if hasattr(signal, n)]
    previous = {s: signal.getsignal(s) for s in signums}
    hook = sys.unraisablehook

    def quiet(unraisable) -> None:
        if not isinstance(unraisable.exc_value, RunInterrupted):
            hook(unraisable)

    _RECEIVED.clear()
    sys.unraisablehook = quiet
    for s in signums:
        if previous[s] is not signal.SIG_IGN:
            signal.signal(s, _interrupt)
    try:
        yield
    finally:
        for s, handler in previous.items():
            if handler is not None:
                signal.signal(s, handler)
        sys.unraisablehook = hook
        _RECEIVED.clear()


class ReservedFile:
    """A single output file outside the output folder (the pseudonym code list), reserved
    before the analysis and put in place at the end without ever replacing another file.

    The reservation creates a hidden temporary file beside ``path`` (so a place that cannot
    be written is found before any work); :meth:`commit` writes it and links it to ``path``
    (a link fails if the name was taken meanwhile) or replaces ``path`` while
    ``may_replace(path)`` still holds; :meth:`discard` removes what was reserved.
    """

    def __init__(self, path: Path, may_replace: Callable[[Path], bool], what: str) -> None:
        self.path = Path(os.path.abspath(path))
        self.may_replace = may_replace
        self.what = what
        self._created = _created_parents(self.path)
        given = str(path)
        if self.path.is_symlink() or (self.path.exists() and not self.path.is_file()):
            raise OutputFolderError(f"{what} {given!r} exists and is not a plain file")
        if self.path.exists() and not may_replace(self.path):
            raise OutputFolderError(
                f"{what} {given!r} exists and is not one that cohort wrote; it is left as it "
                "is: give a new file"
            )
        _check_creatable(self.path, f"{what} {given!r}")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            handle, temporary = tempfile.mkstemp(prefix=f".{self.path.name}.", dir=self.path.parent)
        except OSError as exc:
            self.discard()
            raise OutputFolderError(
                f"cannot write {what} {given!r}: {exc.strerror or exc}"
            ) from None
        os.close(handle)
        self.temporary: Path | None = Path(temporary)

    def commit(self, write: Callable[[Path], object]) -> Path:
        """Write the file with ``write(temporary path)`` and put it in place."""
        if self.temporary is None:
            raise RuntimeError("this file was committed or discarded already")
        try:
            write(self.temporary)
            if self.path.exists() or self.path.is_symlink():
                if self.path.is_symlink() or not self.may_replace(self.path):
                    raise OutputFolderError(
                        f"{self.what} {str(self.path)!r} changed during the run; it is left "
                        "as it is"
                    )
                os.replace(self.temporary, self.path)
            else:
                os.link(self.temporary, self.path)
        except FileExistsError:
            raise OutputFolderError(
                f"{self.what} {str(self.path)!r} appeared during the run; it is left as it is"
            ) from None
        except OSError as exc:
            raise OutputFolderError(
                f"cannot write {self.what} {str(self.path)!r}: {exc.strerror or exc}"
            ) from None
        finally:
            self.discard(keep_parents=True)
        return self.path

    def discard(self, *, keep_parents: bool = False) -> None:
        temporary = getattr(self, "temporary", None)
        if temporary is not None:
            temporary.unlink(missing_ok=True)
            self.temporary = None
        if not keep_parents:
            for folder in self._created:
                try:
                    folder.rmdir()
                except OSError:
                    break
