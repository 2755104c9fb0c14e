"""Where blocks of images are rendered: local worker processes, or a Dask cluster, behind one interface.

A backend has ``processes(n_images)`` (how many renderers a run of that many images uses, which
sets the block size), ``run(render_block, config, out, blocks)`` (the journal lines of each block,
in order of completion) and ``close()``.  The unit of work, ``render_block(config, block, out)``,
is passed in (:func:`synthgen.run.render.render_block`), so no backend imports the run that uses it.

:class:`LocalBackend` renders in this process, or in fresh worker processes
(:mod:`synthgen.run.pool`) when the run is big enough to pay for starting them.

:class:`DaskBackend` (optional extra: ``pip install 'synthgen-shapes[cluster]'``): each task
renders one block, writing the image files straight into the shared output directory, and
returns the block's journal lines; the client (the process that ran ``synthgen make``)
appends them to the journal and finally writes the annotations and the manifest.  Every
worker must see the output directory at the same absolute path and have the same synthgen,
numpy and OpenCV versions as the client, or the images would differ from a local run.
dask is imported only when a cluster is asked for.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from functools import partial
from itertools import islice
from pathlib import Path

from synthgen.errors import UserError
from synthgen.run.pool import run_unordered, usable_cores

__all__ = [
    "INSTALL_HINT",
    "MIN_IMAGES_PER_WORKER",
    "LocalBackend",
    "DaskBackend",
    "open_backend",
    "connect",
    "local_processes",
    "blocks_of",
    "block_size",
]

#: How to get the optional dependency.
INSTALL_HINT = "pip install 'synthgen-shapes[cluster]'"


def _worker_setup() -> None:
    """Once per worker process: OpenCV on one thread (the workers are the parallelism)."""
    import cv2

    cv2.setNumThreads(1)


def blocks_of(indices: Sequence[int], size: int) -> list[list[int]]:
    """Split ``indices`` into consecutive blocks of at most ``size``."""
    indices = list(indices)
    return [indices[i : i + size] for i in range(0, len(indices), size)]


def block_size(n: int, workers: int) -> int:
    """Images per block for ``n`` images on ``workers`` renderers: about four blocks each, at most 16 images."""
    return max(1, min(16, n // (workers * 4)))


#: A run starts ``min(workers, images // MIN_IMAGES_PER_WORKER)`` worker processes and renders in
#: its own process when that is below 2.  A worker costs 0.4-0.6 s to start (a fresh interpreter
#: importing numpy, OpenCV and synthgen).  benchmarks/bench_workers.py on 2 shared cores (wall time,
#: two workers over one process, medians of 3): 64 images 1.13 (default 640x480), 0.95 (demo, 20-30
#: objects), 2.35 (96x72); 128 images 0.87, 0.72, 0.93.  So two workers pay off from about 100
#: images, and from 128 in every case measured.
MIN_IMAGES_PER_WORKER = 64


def local_processes(n_images: int, workers: int) -> int:
    """Processes a local run of ``n_images`` uses with at most ``workers`` (1: this process alone).

    Examples
    --------
    >>> local_processes(16, 2), local_processes(128, 2), local_processes(1000, 2), local_processes(1000, 1)
    (1, 2, 2, 1)
    """
    n = min(workers, n_images // MIN_IMAGES_PER_WORKER)
    return n if n >= 2 else 1


class LocalBackend:
    """Blocks rendered on this machine: in this process, or in at most ``workers`` worker processes.

    A run of fewer than ``2 * MIN_IMAGES_PER_WORKER`` images, or with ``workers`` 1,
    renders in this process (:func:`local_processes`).
    """

    def __init__(self, workers: int):
        self.most = workers

    def processes(self, n_images: int) -> int:
        """Processes a run of ``n_images`` uses (1: this process alone)."""
        return local_processes(n_images, self.most)

    def run(self, render_block, config, out: Path, blocks: list[list[int]]) -> Iterator[list[bytes]]:
        """Journal lines of each block, in order of completion."""
        workers = self.processes(sum(len(b) for b in blocks))
        if workers <= 1 or len(blocks) < 2:
            for block in blocks:
                yield render_block(config, block, out)
            return
        yield from run_unordered(partial(render_block, config, out=str(out)), blocks, workers, setup=_worker_setup)

    def close(self) -> None:
        """Nothing to release: worker processes end with each run."""


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

    def processes(self, n_images: int) -> int:
        """Renderers a run uses: every worker thread of the cluster, whatever ``n_images``."""
        return self.workers

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
        local = distributed.LocalCluster(
            n_workers=workers or usable_cores(), threads_per_worker=1, processes=True, dashboard_address=None
        )
        return DaskBackend(distributed.Client(local), local)
    try:
        client = distributed.Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise UserError(f"option '--cluster': cannot reach a Dask scheduler at {address!r} ({exc})") from None
    return DaskBackend(client)


def open_backend(cluster: str | None, workers: int) -> LocalBackend | DaskBackend:
    """The backend of a run: local processes (``cluster`` None), or the Dask cluster ``cluster`` names.

    A cluster fails here, with an install hint or the unreachable address, before anything is written;
    a local cluster (``"local"``) gets ``workers`` processes.
    """
    return LocalBackend(workers) if cluster is None else connect(cluster, workers=workers)
