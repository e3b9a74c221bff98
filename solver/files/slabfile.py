"""One HDF5 file written by all ranks, each rank its own slab, made visible only when whole.

:func:`write_global` writes a file in three phases:

1. ``create(fh)`` makes the datasets (global shapes) and the attributes that
   do not depend on the data;
2. ``fill(fh)`` writes this rank's slab of each dataset (and of any checksum
   dataset) -- no rank ever holds a global array;
3. ``finish(fh)`` writes the completion mark.

With the serial h5py that pip installs, rank 0 creates, the ranks fill one
after another in rank order (each opens, writes, closes, then passes the turn
through a barrier) and rank 0 finishes. With an h5py built against parallel
HDF5 (``h5py.get_config().mpi``) all ranks open the file once with the
``mpio`` driver and call the three phases collectively, so ``create`` and
``finish`` must do the same thing on every rank.

Everything goes to ``.<name>.tmp`` in the target folder. Only when every rank
has succeeded does rank 0 ``fsync`` the file, rename it to its final name (an
atomic replace on POSIX file systems) and ``fsync`` the folder, so a file
under its final name is always complete. On any failure the temporary file is
removed, nothing else is touched, and every rank raises the same
:class:`WriteFailed` naming the final file and the first reason.
"""
from __future__ import annotations

import os

import h5py


class WriteFailed(RuntimeError):
    """A file could not be written; the message (one line) names it and says why."""


def temporary_name(path: str) -> str:
    """The name ``path`` is written under until it is complete."""
    head, tail = os.path.split(path)
    return os.path.join(head, f".{tail}.tmp")


def parallel_hdf5(comm) -> bool:
    """True when the file can be opened by all ranks at once (h5py built with MPI)."""
    return bool(comm.is_mpi and h5py.get_config().mpi)


def _reason(exc: BaseException) -> str:
    """A short, one-line reason from an exception (h5py messages are long)."""
    errno = getattr(exc, "errno", None)
    if errno:
        return f"{os.strerror(errno)} [errno {errno}]"
    text = " ".join(str(exc).split())
    for marker in ("error message = '", "errno = "):
        if marker in text:  # HDF5 tucks the OS error deep in its message
            start = text.index(marker) + len(marker)
            return text[start:].split("'")[0].rstrip(", ")
    return text[:200] or type(exc).__name__


def agree(comm, message: str | None) -> str | None:
    """The first non-empty message over all ranks (rank order), the same on every rank."""
    if not comm.is_mpi:
        return message
    messages = comm.comm.allgather(message)
    return next((m for m in messages if m), None)


def prepare_folder(comm, path: str, what: str, stale=None) -> None:
    """Make ``path`` (on rank 0), check it is writable and remove the files
    ``stale(path)`` lists (a new run replacing the folder's earlier run).

    A failure raises the same :class:`WriteFailed` on every rank:
    ``"<path>: <what> cannot be written (<reason>)"``.
    """
    error = None
    if comm.rank == 0:
        try:
            os.makedirs(path, exist_ok=True)
            if not os.access(path, os.W_OK):
                error = "no permission to write there"
            elif stale is not None:
                for old in stale(path):
                    os.remove(old)
        except OSError as exc:
            error = exc.strerror or str(exc)
    error = agree(comm, error)
    if error:
        raise WriteFailed(f"{path}: {what} cannot be written ({error})")


def _fsync(path: str, directory: bool = False) -> None:
    fd = os.open(path, os.O_RDONLY | (os.O_DIRECTORY if directory else 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def write_global(comm, path: str, create, fill, finish) -> None:
    """Write ``path`` from all ranks (collective); see the module docstring."""
    tmp = temporary_name(path)
    error = None
    if parallel_hdf5(comm):  # pragma: no cover - needs h5py built with parallel HDF5
        try:
            with h5py.File(tmp, "w", driver="mpio", comm=comm.comm) as fh:
                create(fh)
                fill(fh)
                finish(fh)
        except Exception as exc:  # noqa: BLE001 - reported to the user, then re-raised
            error = _reason(exc)
        error = agree(comm, error)
    else:
        if comm.rank == 0:
            try:
                with h5py.File(tmp, "w") as fh:
                    create(fh)
            except Exception as exc:  # noqa: BLE001
                error = _reason(exc)
        error = agree(comm, error)
        if error is None:
            for turn in range(comm.size):
                if turn == comm.rank and error is None:
                    try:
                        with h5py.File(tmp, "r+") as fh:
                            fill(fh)
                    except Exception as exc:  # noqa: BLE001
                        error = _reason(exc)
                comm.barrier()  # the next rank opens the file only after this one closed it
            error = agree(comm, error)
        if error is None and comm.rank == 0:
            try:
                with h5py.File(tmp, "r+") as fh:
                    finish(fh)
            except Exception as exc:  # noqa: BLE001
                error = _reason(exc)
        error = agree(comm, error)
    if error is None and comm.rank == 0:
        try:
            _fsync(tmp)
            os.replace(tmp, path)
        except OSError as exc:
            error = _reason(exc)
        else:
            try:  # makes the rename itself durable; some file systems refuse it
                _fsync(os.path.dirname(os.path.abspath(path)), directory=True)
            except OSError:
                pass
    error = agree(comm, error)
    if error is not None:
        if comm.rank == 0:
            try:
                os.remove(tmp)
            except OSError:
                pass  # never written, or the folder itself is the problem
        raise WriteFailed(f"{path}: could not be written ({error})")
