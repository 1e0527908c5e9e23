"""Reading and writing the user's files safely.

Reading (:func:`read_text`, :func:`check_input_file`): regular files only (a
device such as ``/dev/zero``, a pipe or a socket is refused before it is
opened for reading, so nothing hangs or streams forever), a size limit per
kind of file, and the common text encodings (UTF-8 with or without a
byte-order mark, UTF-16 and UTF-32 with one, Latin-1 as the fallback).

Writing (:func:`atomic_write`): the one writer every command uses.  It writes
a temporary file beside the target, syncs it and renames it over the target,
so a full disk or a crash leaves the previous file intact; it keeps an
existing file's permission bits (a new file gets the user's umask), writes
through a symbolic link to the file it points at (the link stays a link),
refuses to overwrite a file the command is reading, and never creates a
missing folder.  Failures raise :class:`FileError`, one clear line.
"""
from __future__ import annotations

import codecs
import os
import stat
import tempfile
from pathlib import Path
from typing import Callable, Iterable

from solderless.engine.errors import DesignError, SolderlessError

#: Largest netlist, model library or design file read (bytes).  Model
#: libraries of a few thousand cards are well under 1 MB.
MAX_TEXT_BYTES = 16 * 2**20
#: Largest audio file read (bytes): 2 GiB, about 3 hours of stereo 32-bit
#: float at 48 kHz.
MAX_AUDIO_BYTES = 2 * 2**30


class FileError(DesignError, OSError):
    """A file that cannot be read or written (missing, not a regular file,
    too large, a folder that does not exist, a full disk ...).  Also an
    OSError, so code that already handles OSError keeps working."""

    def __init__(self, message, **kw):
        SolderlessError.__init__(self, message, **kw)


def _mb(n: int) -> str:
    return f"{n / 2**20:.0f} MB" if n >= 2**20 else f"{n} bytes"


def check_input_file(path, *, what: str = "file", limit: int = MAX_TEXT_BYTES,
                     where=None) -> os.stat_result:
    """Check that ``path`` is a regular file no larger than ``limit``.

    ``where`` (an object with ``file`` and ``line``) is where the path was
    written (an ``.include`` card); errors then name that place and quote the
    path.  Returns the file's stat.  Raises :class:`FileError`.
    """
    path = os.fspath(path)
    if where is not None and getattr(where, "file", None):
        loc = dict(file=where.file, line=getattr(where, "line", None))
        name = f"{what} '{path}'"
    else:
        loc = dict(file=path)
        name = what
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise FileError(f"cannot read {name}: no such file", **loc,
                        hint="check the path (relative paths start at the folder "
                             "of the file that names them)" if where is not None
                        else "check the path") from None
    except OSError as exc:
        raise FileError(f"cannot read {name}: {exc.strerror or exc}", **loc) from None
    if stat.S_ISDIR(st.st_mode):
        raise FileError(f"{name} is a folder, not a file", **loc)
    if not stat.S_ISREG(st.st_mode):
        raise FileError(f"{name} is not a regular file (a device, pipe or socket)", **loc,
                        hint="Solderless reads only ordinary files")
    if st.st_size > limit:
        raise FileError(f"{name} is {_mb(st.st_size)}; the limit for a {what} is "
                        f"{_mb(limit)}", **loc)
    return st


def read_bytes(path, *, what: str = "file", limit: int = MAX_TEXT_BYTES,
               where=None) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes (see
    :func:`check_input_file`).  Opened without blocking, and at most
    ``limit`` bytes are read even if the file grows or is swapped meanwhile."""
    check_input_file(path, what=what, limit=limit, where=where)
    path = os.fspath(path)
    loc = (dict(file=where.file, line=getattr(where, "line", None))
           if where is not None and getattr(where, "file", None) else dict(file=path))
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0)
                     | getattr(os, "O_NOCTTY", 0))
    except OSError as exc:
        raise FileError(f"cannot read {what}: {exc.strerror or exc}", **loc) from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise FileError(f"{what} is not a regular file", **loc)
        chunks, total = [], 0
        while True:
            b = os.read(fd, min(1 << 20, limit + 1 - total))
            if not b:
                break
            chunks.append(b)
            total += len(b)
            if total > limit:
                raise FileError(f"{what} is larger than the limit of {_mb(limit)}", **loc)
        return b"".join(chunks)
    except OSError as exc:
        if isinstance(exc, FileError):
            raise
        raise FileError(f"cannot read {what}: {exc.strerror or exc}", **loc) from None
    finally:
        os.close(fd)


_BOMS = ((codecs.BOM_UTF32_LE, "utf-32-le"), (codecs.BOM_UTF32_BE, "utf-32-be"),
         (codecs.BOM_UTF8, "utf-8"), (codecs.BOM_UTF16_LE, "utf-16-le"),
         (codecs.BOM_UTF16_BE, "utf-16-be"))


def decode_text(raw: bytes) -> tuple[str, str]:
    """Decode a text file: a byte-order mark decides (UTF-8, UTF-16, UTF-32);
    without one, UTF-16 when every other byte of the start is zero, else
    UTF-8, else Latin-1 (which reads any bytes).  Returns (text, encoding)."""
    for bom, enc in _BOMS:
        if raw.startswith(bom):
            try:
                return raw[len(bom):].decode(enc), enc
            except UnicodeDecodeError:
                break
    head = raw[:200]
    if len(head) >= 4 and len(head) % 2 == 0:
        if head[1::2].count(0) == len(head) // 2 and head[0::2].count(0) == 0:
            try:
                return raw.decode("utf-16-le"), "utf-16-le"
            except UnicodeDecodeError:
                pass
        if head[0::2].count(0) == len(head) // 2 and head[1::2].count(0) == 0:
            try:
                return raw.decode("utf-16-be"), "utf-16-be"
            except UnicodeDecodeError:
                pass
    try:
        return raw.decode("utf-8"), "utf-8"
    except UnicodeDecodeError:
        return raw.decode("latin-1"), "latin-1"


def is_text(text: str) -> bool:
    """True if ``text`` has no control characters other than tab, line ends
    and form feed (a binary file decoded as Latin-1 fails this)."""
    return not any(ord(c) < 32 and c not in "\t\n\r\f\v" or c == "\x7f"
                   for c in text[:65536])


def read_text(path, *, what: str = "file", limit: int = MAX_TEXT_BYTES,
              where=None) -> str:
    """A text file's contents (see :func:`read_bytes`, :func:`decode_text`);
    a file that is not text raises :class:`FileError` without quoting it."""
    text, _ = decode_text(read_bytes(path, what=what, limit=limit, where=where))
    if not is_text(text):
        path = os.fspath(path)
        if where is not None and getattr(where, "file", None):
            raise FileError(f"{what} '{path}' is not a text file", file=where.file,
                            line=getattr(where, "line", None))
        raise FileError(f"not a text file (expected a {what})", file=path)
    return text


# ----------------------------------------------------------------- writing

def _umask() -> int:
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    old = os.umask(0o022)
    os.umask(old)
    return old


def file_mode_for(target) -> int:
    """Permission bits a file written to ``target`` gets: those of the file
    already there, else 0666 less the user's umask (as ``open`` gives)."""
    try:
        return stat.S_IMODE(os.stat(os.path.realpath(target)).st_mode)
    except OSError:
        return 0o666 & ~_umask()


def _same_file(a, b) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def write_target(target) -> Path:
    """The file a write to ``target`` lands in (through symbolic links),
    after the checks :func:`atomic_write` makes before writing anything:
    the target is not a folder and its folder exists.  Raises FileError."""
    target = os.fspath(target)
    if not target:
        raise FileError("no file name to write to", hint="give a path")
    real = Path(os.path.realpath(target))
    if real.is_dir():
        raise FileError("is a folder, not a file", file=target,
                        hint="give a file name inside the folder")
    if not real.parent.is_dir():
        raise FileError(f"folder '{Path(target).parent}' does not exist", file=target,
                        hint="create the folder first or choose another path")
    return real


def output_folder(path) -> Path:
    """Create the output folder ``path`` (and its parents) if it is missing
    and return it; a failure is a SolderlessError naming the folder."""
    out = Path(path)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SolderlessError(f"cannot create the output folder: {exc.strerror or exc}",
                              file=str(out), hint="choose another --out folder") from None
    return out


def atomic_write(target, data: bytes | str | Callable[[str], None], *,
                 inputs: Iterable = (), suffix: str = ".tmp",
                 encoding: str = "utf-8") -> Path:
    """Write ``data`` to ``target`` atomically and return the file written.

    ``data`` is bytes, text (encoded with ``encoding``) or a function that
    writes the file at the temporary path it is given (for libraries that
    write by name, such as soundfile; ``suffix`` then gives the temporary
    file the extension the library expects).  ``inputs`` are files the
    command reads: writing over one of them is refused.
    """
    real = write_target(target)
    shown = os.fspath(target)
    for inp in inputs:
        if inp is not None and _same_file(inp, real):
            raise FileError("is also the input; writing it would destroy the input "
                            "before it is read", file=shown,
                            hint="write to another file name")
    mode = file_mode_for(real)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{real.name}.", suffix=suffix,
                                   dir=str(real.parent))
        if callable(data):
            os.close(fd)
            data(tmp)
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        else:
            raw = data.encode(encoding) if isinstance(data, str) else bytes(data)
            with os.fdopen(fd, "wb") as f:
                f.write(raw)
                f.flush()
                os.fsync(f.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, real)
        tmp = None
        try:
            dfd = os.open(str(real.parent), os.O_RDONLY)
            try:
                os.fsync(dfd)
            finally:
                os.close(dfd)
        except OSError:
            pass
    except OSError as exc:
        if isinstance(exc, FileError):
            raise
        why = exc.strerror or str(exc)
        hint = ("the disk is full; the previous file is unchanged"
                if getattr(exc, "errno", None) == 28 else
                "check that the folder is writable; any previous file is unchanged")
        raise FileError(f"cannot write: {why}", file=shown, hint=hint) from None
    except Exception as exc:
        # a library writing by name reports a full disk or a bad path in its
        # own exception type ("System error.")
        why = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        try:
            vfs = os.statvfs(str(real.parent))
            if vfs.f_bavail * vfs.f_frsize < 256 * 1024:
                why = os.strerror(28) + " (the disk is full)"
        except OSError:
            pass
        raise FileError(f"cannot write: {why}", file=shown,
                        hint="any previous file is unchanged") from None
    finally:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
    return real


def atomic_write_text(target, text: str, **kw) -> Path:
    """:func:`atomic_write` for text (UTF-8)."""
    return atomic_write(target, text, **kw)
