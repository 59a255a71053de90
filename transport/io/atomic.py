"""All-or-nothing output files: temporary names, a check, then renames together.

Every file stratiflux writes goes through this module. A command stages each output
under a temporary name in the output's own directory (same file system, so the final
:func:`os.replace` is atomic), and only when every file of the run has been produced
are they renamed into place, one after the other, in :meth:`OutputSet.commit`:

* a failure while producing any file (solver, summary, a writer, a figure, a full disk,
  Ctrl-C) removes the temporary files and leaves every previous output byte-identical;
* a failure of one of the renames puts back the files already replaced (each is kept
  under a hard link until the last rename has succeeded), so the folder again holds
  the previous run's files;
* the only window in which a folder can hold files of two runs is a crash of the
  machine or a SIGKILL between two renames of :meth:`OutputSet.commit` (microseconds);
  the temporary files and links left by such a crash are then removed by the next run
  that writes the same outputs.

Temporary names follow one pattern, ``.<name>.<pid>-<random>.part<ext>`` (for
example ``.site.gpkg.4242-k3j9x2.part.gpkg``; the extension is kept so that format
drivers recognise the file), and backups ``.<name>.<pid>-<random>.bak``.
:func:`clean_stale` removes only such files for the outputs about to be written, only
when older than the current process and when the process named in them is gone: a
user's own files, and the temporaries of a run still going on, are never touched.

Examples
--------
>>> with OutputSet() as out:                                    # doctest: +SKIP
...     out.write("run.nc", lambda tmp: dataset.to_netcdf(tmp))
...     out.write("run.png", lambda tmp: figure.savefig(tmp, format="png"))
... # both appear here, together; on an exception neither changed
"""
from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import signal
import threading
import time

__all__ = ["OutputSet", "atomic_write", "clean_stale", "clean_stale_stem", "temporary_name", "TEMP_PATTERN",
           "LEGACY_PATTERN", "new_file_mode", "fsync_file", "stage_or_write",
           "terminate_as_exit", "write_text", "STARTED", "process_alive"]

#: ``.<name>.<pid>-<token>.part[<ext>]`` or ``.<name>.<pid>-<token>.bak``
TEMP_PATTERN = re.compile(r"^\.(?P<name>.+)\.(?P<pid>\d+)-(?P<token>[a-z0-9]{6})"
                          r"\.(?:part(?P<ext>\.[A-Za-z0-9]+)?|bak)$")
#: the temporaries of earlier versions (:func:`tempfile.mkstemp`: ``.<name>.<8>.part``)
LEGACY_PATTERN = re.compile(r"^\.(?P<name>.+)\.(?P<token>[a-z0-9_]{8})\.part$")


#: When this module was loaded (seconds since the epoch): no temporary file of this
#: process is older (the process start time from the kernel is rounded to a second of
#: boot time, too coarse for a run started right after a killed one).
STARTED = time.time()


def new_file_mode(path: str) -> int:
    """Permissions for an output: those of the file replaced, else 0o666 minus umask."""
    try:
        return os.stat(path).st_mode & 0o7777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


def temporary_name(path, kind: str = "part") -> str:
    """A fresh temporary name for ``path`` in its directory (the tool's own pattern)."""
    path = os.fspath(path)
    directory, name = os.path.split(os.path.abspath(path))
    ext = os.path.splitext(name)[1] if kind == "part" else ""
    if ext and not re.fullmatch(r"\.[A-Za-z0-9]+", ext):
        ext = ""
    token = "".join(secrets.choice("abcdefghijklmnopqrstuvwxyz0123456789") for _ in range(6))
    return os.path.join(directory, f".{name}.{os.getpid()}-{token}.{kind}{ext}")


def process_alive(pid: int) -> bool:
    """Whether a process ``pid`` exists (this one, or one owned by anyone)."""
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # EPERM: exists, owned by someone else
        return True
    return True


def clean_stale(paths) -> list:
    """Remove temporaries left by killed earlier runs for the outputs ``paths``.

    A file is removed only if its name matches :data:`TEMP_PATTERN` (or
    :data:`LEGACY_PATTERN`, the name earlier versions used) for one of ``paths`` (same
    directory, same output name), it was last modified before this process started,
    and the process id in its name, if any, is not running. Returns the removed paths.
    """
    wanted = {}
    for p in paths:
        directory, name = os.path.split(os.path.abspath(os.fspath(p)))
        wanted.setdefault(directory, set()).add(name)
    removed = []
    for directory, names in wanted.items():
        removed += _clean_dead(directory, names.__contains__)
    return removed


def clean_stale_stem(directory, stem: str) -> list:
    """As :func:`clean_stale`, for every output named ``<stem>.<ext>`` or
    ``<stem>_<anything>`` in ``directory`` (a command whose set of files depends on its
    input, e.g. ``compare``'s figures: the temporaries of a killed run that wrote a
    file this run will not write are removed too). Returns the removed paths."""
    def ours(name):
        return name.startswith(stem + ".") or name.startswith(stem + "_")
    return _clean_dead(os.path.abspath(os.fspath(directory)), ours)


def _clean_dead(directory, wanted) -> list:
    """Remove the temporaries in ``directory`` of the outputs ``wanted(name)`` accepts,
    left by processes that are gone (rules of :func:`clean_stale`)."""
    removed = []
    try:
        entries = list(os.scandir(directory))
    except OSError:
        return removed
    for entry in entries:
        match = TEMP_PATTERN.match(entry.name) or LEGACY_PATTERN.match(entry.name)
        if not match or not wanted(match["name"]):
            continue
        try:
            if not entry.is_file(follow_symlinks=False):
                continue
            if entry.stat(follow_symlinks=False).st_mtime >= STARTED:
                continue
        except OSError:
            continue
        pid = match.groupdict().get("pid")
        if pid is not None and process_alive(int(pid)):
            continue
        with contextlib.suppress(OSError):
            os.remove(entry.path)
            removed.append(entry.path)
    return removed


def fsync_file(path):
    """Flush a finished file to disk (a power cut after the rename keeps its content)."""
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _fsync_dir(directory):
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(directory, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _remove(path):
    with contextlib.suppress(OSError):
        os.remove(path)


class OutputSet:
    """Outputs of one run, produced under temporary names and renamed together.

    Use as a context manager: the files are committed when the block ends normally,
    discarded when it raises. :meth:`write` runs a writer on a temporary name;
    :meth:`reserve` hands out a temporary name for writers that fill a file
    progressively (the caller writes it, the set renames it). Stale temporaries of the
    same outputs (see :func:`clean_stale`) are removed when an output is first named.
    """

    def __init__(self):
        self._staged = []  # [(tmp, final)]
        self._done = False

    # -- staging ---------------------------------------------------------------
    def reserve(self, path) -> str:
        """A temporary name for ``path``; the caller creates and fills the file."""
        if self._done:
            raise RuntimeError("this output set was already committed or discarded")
        final = os.path.abspath(os.fspath(path))
        if any(f == final for _, f in self._staged):
            raise ValueError(f"{final} is staged twice in one run")
        directory = os.path.dirname(final)
        if not os.path.isdir(directory):
            raise FileNotFoundError(errno.ENOENT, "the output directory does not exist",
                                    directory)
        clean_stale([final])
        tmp = temporary_name(final)
        self._staged.append((tmp, final))
        return tmp

    def write(self, path, writer) -> str:
        """Run ``writer(tmp)`` to produce ``path`` under a temporary name; returns
        ``path`` as given. On an exception the temporary file is removed (the other
        staged files stay staged until the set is discarded)."""
        tmp = self.reserve(path)
        try:
            writer(tmp)
            if not os.path.isfile(tmp):
                raise OSError(errno.EIO, "the writer produced no file", os.fspath(path))
        except OSError as exc:
            _remove(tmp)
            if exc.filename is not None and os.path.abspath(os.fspath(exc.filename)) == tmp:
                # name the file the user asked for, not the temporary one
                raise type(exc)(exc.errno, exc.strerror or str(exc), os.fspath(path)) \
                    from exc
            raise
        except BaseException:
            _remove(tmp)
            raise
        return os.fspath(path)

    @property
    def staged(self):
        """[(temporary path, final path)] in staging order."""
        return list(self._staged)

    # -- ending ----------------------------------------------------------------
    def discard(self):
        """Remove every temporary file; the previous outputs stay as they were."""
        for tmp, _ in self._staged:
            _remove(tmp)
        self._staged = []
        self._done = True

    def commit(self):
        """Rename every staged file into place; on a failed rename restore the files
        already replaced and remove the rest (then re-raise)."""
        if self._done:
            raise RuntimeError("this output set was already committed or discarded")
        for tmp, final in self._staged:
            if not os.path.isfile(tmp):
                self.discard()
                raise FileNotFoundError(errno.ENOENT, "a staged output is missing", final)
        for tmp, final in self._staged:
            with contextlib.suppress(OSError):
                os.chmod(tmp, new_file_mode(final))
            fsync_file(tmp)
        backups, replaced = {}, []
        try:
            for tmp, final in self._staged:
                if os.path.lexists(final):
                    backup = temporary_name(final, kind="bak")
                    try:
                        os.link(final, backup)
                        backups[final] = backup
                    except OSError:  # no hard links here: no way back for this one
                        pass
                os.replace(tmp, final)
                replaced.append(final)
        except BaseException:
            for final in reversed(replaced):
                with contextlib.suppress(OSError):
                    if final in backups:
                        os.replace(backups.pop(final), final)
                    else:
                        os.remove(final)
            for backup in backups.values():
                _remove(backup)
            self.discard()
            raise
        for backup in backups.values():
            _remove(backup)
        for directory in {os.path.dirname(f) for _, f in self._staged}:
            _fsync_dir(directory)
        self._staged = []
        self._done = True

    def __enter__(self):
        return self

    def __exit__(self, kind, value, tb):
        if self._done:
            return False
        if kind is None:
            self.commit()
        else:
            self.discard()
        return False


def atomic_write(path, writer) -> str:
    """One file through a temporary name and a rename: ``writer(tmp)`` produces it.

    On any exception the temporary file is removed and an existing ``path`` is left
    untouched. Returns ``path`` as given.
    """
    with OutputSet() as out:
        out.write(path, writer)
    return os.fspath(path)


def stage_or_write(stage, path, writer) -> str:
    """``stage.write(path, writer)`` inside an :class:`OutputSet`, else
    :func:`atomic_write`: the writers of stratiflux take an optional ``stage``."""
    if stage is not None:
        return stage.write(path, writer)
    return atomic_write(path, writer)


def write_text(path, text: str, *, stage=None) -> str:
    """Write ``text`` to ``path`` as UTF-8 (no newline translation) through
    :func:`stage_or_write`: staged in ``stage`` when given, else atomically on its own.
    Returns ``path`` as given."""
    def writer(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
    return stage_or_write(stage, path, writer)


@contextlib.contextmanager
def terminate_as_exit():
    """Within the block, SIGTERM ends the program like Ctrl-C does (through Python's
    exception handling), so temporary files are removed on the way out. Only in the
    main thread; elsewhere a no-op."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise SystemExit(128 + signum)

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except (ValueError, OSError):  # pragma: no cover - unusual embedding
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)
