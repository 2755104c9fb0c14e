"""Rendering on a Dask distributed cluster (optional extra: ``pip install 'synthgen-shapes[cluster]'``).

Each task renders one block of image indices with
:func:`synthgen.run.make.render_block`, writing the image files straight into
the shared output directory, and returns the block's journal lines; the client
(the process that ran ``synthgen make``) appends them to the journal and
finally writes the annotations and the manifest.  Every worker must see the
output directory at the same absolute path and have the same synthgen, numpy
and OpenCV versions as the client, or the images would differ from a local run.

This module imports dask only when a cluster is asked for.
"""

from __future__ import annotations

from collections.abc import Iterator
from itertools import islice
from pathlib import Path

from synthgen.errors import UserError

__all__ = ["INSTALL_HINT", "DaskBackend", "connect"]

#: How to get the optional dependency.
INSTALL_HINT = "pip install 'synthgen-shapes[cluster]'"


class DaskBackend:
    """Blocks of images rendered by the workers of a Dask cluster.

    Parameters
    ----------
    client : distributed.Client
    local_cluster : distributed.LocalCluster or None
        A cluster this backend started and must close.
    """

    def __init__(self, client, local_cluster=None):
        self.client = client
        self._local = local_cluster

    @property
    def workers(self) -> int:
        """Worker threads in the cluster (at least 1)."""
        return max(1, sum(self.client.nthreads().values()))

    def run(self, render_block, config, out: Path, blocks: list[list[int]]) -> Iterator[list[bytes]]:
        """Journal lines of each block, in order of completion.

        ``render_block(config, block, out)`` is the unit of work (the caller's, so this
        module does not import the run that uses it).

        At most four blocks per worker thread are in flight, so the client's
        memory does not grow with the number of images.
        """
        from distributed import as_completed

        out = str(Path(out).resolve())
        shared_config = self.client.scatter(config, broadcast=True)
        todo = iter(blocks)

        def submit(block):
            return self.client.submit(render_block, shared_config, block, out, pure=False)

        running = [submit(b) for b in islice(todo, 4 * self.workers)]
        if not running:
            return
        queue = as_completed(running)
        try:
            for fut in queue:
                lines = fut.result()
                fut.release()
                nxt = next(todo, None)
                if nxt is not None:
                    queue.add(submit(nxt))
                yield lines
        finally:
            queue.clear()
            self.client.cancel(running)

    def close(self) -> None:
        """Close the client, and the local cluster if this backend started it."""
        self.client.close()
        if self._local is not None:
            self._local.close()


def connect(address: str, *, workers: int | None = None) -> DaskBackend:
    """Connect to the Dask scheduler at ``address``, or start a local cluster for ``"local"``.

    Parameters
    ----------
    address : str
        ``"tcp://host:8786"`` or another address ``distributed.Client`` takes, or ``"local"``.
    workers : int or None
        Worker processes of a local cluster (None: every usable core).

    Raises
    ------
    UserError
        When dask.distributed is not installed (with the install command) or
        the scheduler cannot be reached.
    """
    try:
        import distributed
    except ImportError:
        raise UserError(f"option '--cluster' needs dask.distributed, which is not installed: {INSTALL_HINT}") from None
    if address == "local":
        from synthgen.run.pool import usable_cores

        local = distributed.LocalCluster(
            n_workers=workers or usable_cores(), threads_per_worker=1, processes=True, dashboard_address=None
        )
        return DaskBackend(distributed.Client(local), local)
    try:
        client = distributed.Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise UserError(f"option '--cluster': cannot reach a Dask scheduler at {address!r} ({exc})") from None
    return DaskBackend(client)
