"""A run's output set, written whole: the previous set or the new one, never a mixture.

Every file of a run is written into a hidden staging folder beside the
output folder; then, with SIGINT, SIGTERM, SIGHUP and SIGALRM held back, the
staging folder and the output folder trade places in one system call
(``renameat2`` with ``RENAME_EXCHANGE`` on Linux) and the staging folder,
which now holds the previous set, is removed.  A run stopped before the
exchange (a signal, a full disk, the time limit) removes its staging folder
and leaves the previous set as it was.  Only SIGKILL, which no program can
catch, can leave a staging folder behind; the next run into the same folder
removes it.

Because the whole folder is replaced, an output folder may hold nothing but
stepper's own files; a folder with other files in it is refused.
"""

from __future__ import annotations

import ctypes
import errno
import os
import re
import shutil
import signal
import stat
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Mapping

from .errors import InputError

OUTPUT_NAMES = frozenset({"trace.json", "report.tex", "appendix.tex", "report.pdf", "derivation.ipynb",
                          "report.log"})
"""Every file name a run may write into its output folder (besides the plots, see PLOT_NAME)."""

PLOT_NAME = re.compile(r"plot-[0-9]{1,3}(-[a-z]+)+\.pdf")
"""The plots' figure files (``plot-1-kretschmann.pdf``), written beside report.tex (stepper.plots)."""


def is_output_name(name: str) -> bool:
    """Whether ``name`` is a file name stepper writes into an output folder."""
    return name in OUTPUT_NAMES or PLOT_NAME.fullmatch(name) is not None

TOLERATED_NAMES = frozenset({".ipynb_checkpoints"})
"""Names others put into an output folder (Jupyter's checkpoints of the notebook); replaced with the set."""

STAGING_PREFIX = ".stepper-"

HELD_SIGNALS = frozenset({signal.SIGINT, signal.SIGTERM, signal.SIGHUP, signal.SIGALRM})

_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


class SwapState:
    """Where a run got to with its outputs; read by the command line to say what was kept."""

    def __init__(self) -> None:
        self.replaced = False


def what_is_kept(folder: Path | None, state: SwapState) -> str:
    """What a run that stopped leaves in its output folder, in words for its last message."""
    if state.replaced:
        return f"the new outputs were already complete in {folder}"
    if folder is not None and Path(folder).is_dir() and any(Path(folder).iterdir()):
        return f"the previous outputs in {folder} are kept"
    return "nothing was written"


def check_output_folder(folder: Path) -> None:
    """Refuse, before any work is done, an output folder stepper may not replace as a whole.

    The folder may be missing (it is created), empty, or hold stepper's
    outputs only; it may not be a file, the current folder or a folder
    that holds the current folder.
    """
    if folder.name in ("", ".", ".."):
        raise InputError(f"'{folder}' cannot be an output folder: give a named folder with -o")
    if folder.exists() and not folder.is_dir():
        raise InputError(f"output folder {folder} exists and is not a folder")
    absolute = Path(os.path.abspath(folder))
    here = Path(os.getcwd())
    if absolute == here or absolute in here.parents:
        raise InputError(f"output folder {folder} is the current folder or holds it; stepper replaces its "
                         "output folder as a whole, so give another folder with -o")
    if folder.is_dir():
        foreign = sorted(name for name in os.listdir(folder)
                         if not is_output_name(name) and name not in TOLERATED_NAMES)
        if foreign:
            shown = ", ".join(foreign[:3]) + (", ..." if len(foreign) > 3 else "")
            raise InputError(f"output folder {folder} holds files stepper did not write ({shown}); stepper "
                             "replaces its output folder as a whole, so give a new or empty folder with -o")
        if not os.access(folder, os.W_OK | os.X_OK):
            raise InputError(f"cannot write into output folder {folder}: permission denied")
    parent = _existing_ancestor(absolute.parent)
    if not parent.is_dir():
        raise InputError(f"cannot create output folder {folder}: {parent} is not a folder")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"cannot create files in {parent}: permission denied")


def _existing_ancestor(path: Path) -> Path:
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def replace_output_set(folder: Path, files: Mapping[str, str | bytes], keep: tuple[str, ...] = (),
                       state: SwapState | None = None) -> None:
    """Make ``folder`` hold exactly ``files`` (text is written as UTF-8), plus the files named in
    ``keep`` copied from the previous set, replacing the previous set in one step.

    Raises :class:`InputError` when the files cannot be written; the previous
    set is then untouched and no staging folder is left.
    """
    state = state or SwapState()
    folder = Path(os.path.abspath(folder))
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise InputError(f"cannot create {folder.parent}: {err.strerror or err}") from None
    remove_stale_staging(folder)
    try:
        staging = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{folder.name}.", suffix=f".{os.getpid()}",
                                        dir=folder.parent))
    except OSError as err:
        raise InputError(f"cannot write into {folder.parent}: {err.strerror or err}") from None
    try:
        os.chmod(staging, _folder_mode(folder))
        for name, content in files.items():
            _write_file(staging / name, content.encode("utf-8") if isinstance(content, str) else content)
        for name in keep:
            if name not in files and (folder / name).is_file():
                shutil.copy2(folder / name, staging / name)
        _sync_folder(staging)
        with signals_held():
            if folder.exists():
                exchange(staging, folder)
            else:
                os.rename(staging, folder)
            state.replaced = True
            _sync_folder(folder.parent)
            shutil.rmtree(staging, ignore_errors=True)  # after an exchange it holds the previous set
    except OSError as err:
        shutil.rmtree(staging, ignore_errors=True)
        raise InputError(f"cannot write the outputs to {folder}: {err.strerror or err}; "
                         f"{what_is_kept(folder, state)}") from None
    except BaseException:
        if not state.replaced:
            shutil.rmtree(staging, ignore_errors=True)
        raise


def _write_file(path: Path, data: bytes) -> None:
    with open(path, "xb") as out:
        out.write(data)
        out.flush()
        os.fsync(out.fileno())


def _folder_mode(folder: Path) -> int:
    """The previous folder's permissions, or those a new folder gets under the umask."""
    if folder.is_dir():
        return stat.S_IMODE(folder.stat().st_mode)
    umask = os.umask(0)
    os.umask(umask)
    return 0o777 & ~umask


def _sync_folder(folder: Path) -> None:
    try:
        descriptor = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(descriptor)
    except OSError:
        pass
    finally:
        os.close(descriptor)


def exchange(first: Path, second: Path) -> None:
    """Swap two folders atomically (Linux ``renameat2`` with ``RENAME_EXCHANGE``).

    Where the system cannot (another kernel or file system), ``second`` is
    renamed aside and ``first`` renamed into its place, and ``first`` then
    names the previous folder: the same end state, with a moment in between
    when ``second`` does not exist.
    """
    if _renameat2 is not None:
        result = _renameat2(_AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE)
        if result == 0:
            return
        code = ctypes.get_errno()
        if code not in (errno.EINVAL, errno.ENOSYS, errno.ENOTSUP):
            raise OSError(code, os.strerror(code), str(second))
    aside = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{second.name}.", suffix=f".{os.getpid()}",
                                  dir=second.parent))
    os.rmdir(aside)
    os.rename(second, aside)
    os.rename(first, second)
    os.rename(aside, first)


def _load_renameat2():
    try:
        function = ctypes.CDLL(None, use_errno=True).renameat2
    except (AttributeError, OSError):
        return None
    function.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    function.restype = ctypes.c_int
    return function


_renameat2 = _load_renameat2()


@contextmanager
def signals_held() -> Iterator[None]:
    """Hold back the signals that stop a run until the block is done; they are delivered after it."""
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, HELD_SIGNALS)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def remove_stale_staging(folder: Path) -> None:
    """Remove staging folders beside ``folder`` left by runs that were killed (their process is gone)."""
    prefix = f"{STAGING_PREFIX}{folder.name}."
    try:
        names = os.listdir(folder.parent)
    except OSError:
        return
    for name in names:
        if not name.startswith(prefix):
            continue
        pid = name.rsplit(".", 1)[-1]
        if pid.isdigit() and not _process_alive(int(pid)):
            shutil.rmtree(folder.parent / name, ignore_errors=True)


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
