"""Running a budget block by block in time: local threads, or a dask.distributed cluster.

`run_blocks(func, nt, chunk)` calls ``func(slice)`` for consecutive blocks of time steps and
returns their results in time order. Memory stays bounded by the blocks in flight (one per
worker thread), whatever the record length.

Where the blocks run (``scheduler``):

* ``None`` or ``"threads"``: dask's local threaded scheduler on this machine (the default);
* ``"sync"`` (or ``"synchronous"``): one block after another in the calling thread;
* ``"tcp://HOST:PORT"`` (any dask.distributed address) or a ``distributed.Client``: the
  blocks run as tasks on that cluster. The function (with its fields and stencil) is sent to
  the cluster once; the workers must be able to open the same input files.

No parallel machinery of our own: dask's schedulers do all of it.

Progress: ``progress(done, total)`` is called in the calling thread with the number of time
steps finished so far (in any order of blocks), once at the start and after every block.

Interruption and resume: with ``store=DIR`` every finished block (a `budget.blocks.BlockSums`)
is saved there (one ``.npz`` file per block in the BlockSums format, written to a temporary
name and renamed, so a block on disk is always complete) together with ``manifest.json``
naming the job (``key``) and the format. Running the same job again with the same store loads
the finished blocks and computes only the rest; a store that holds another job, or blocks of
an older format, is refused with a sentence. Ctrl-C raises `Interrupted` (a KeyboardInterrupt)
saying how many steps were done and where they are kept; nothing else is written.
"""

from __future__ import annotations

import json
import os
import shutil
import uuid
from pathlib import Path

import numpy as np

from .blocks import BLOCK_FORMAT, BlockSums
from .errors import RequestError

__all__ = ["run_blocks", "Interrupted", "BlockStore", "is_cluster"]

_STORE_FORMAT = f"fluxfence-blocks-{BLOCK_FORMAT}"


class Interrupted(KeyboardInterrupt):
    """A run stopped by Ctrl-C: ``done`` of ``total`` steps finished, kept in ``store``."""

    def __init__(self, done: int, total: int, store: str | None = None):
        self.done, self.total, self.store = int(done), int(total), store
        super().__init__(self.message())

    def message(self) -> str:
        text = f"interrupted after {self.done} of {self.total} time steps; no output was written"
        if self.store and self.done:
            text += f"; the finished steps are kept in {self.store}: run the same command again to resume"
        return text + "."


# -- the store of finished blocks ------------------------------------------------------------
class BlockStore:
    """A folder of finished blocks of one job, for resuming an interrupted run."""

    def __init__(self, path, key: str):
        self.path = Path(path)
        self.key = str(key)
        man = self.path / "manifest.json"
        if man.exists():
            try:
                old = json.loads(man.read_text())
            except (OSError, ValueError):
                old = {}
            fmt = str(old.get("format", ""))
            if fmt.startswith("fluxfence-blocks-") and fmt != _STORE_FORMAT:
                raise RequestError(
                    f"The folder {str(self.path)!r} holds finished steps written by another version of "
                    f"Fluxfence ({fmt}, this one writes {_STORE_FORMAT}); delete it to start afresh."
                )
            if fmt != _STORE_FORMAT or old.get("key") != self.key:
                raise RequestError(
                    f"The folder {str(self.path)!r} holds finished steps of a different run (other "
                    "fields, region, window or options); delete it or give another folder to resume into."
                )
        else:
            try:
                self.path.mkdir(exist_ok=True)
            except FileNotFoundError:
                raise RequestError(
                    f"The folder {str(self.path.parent)!r} does not exist; create it or write somewhere else."
                ) from None
            _atomic_write_text(man, json.dumps({"format": _STORE_FORMAT, "key": self.key}))

    def _file(self, ts: slice) -> Path:
        return self.path / f"block_{ts.start:09d}_{ts.stop:09d}.npz"

    def load(self, ts: slice) -> BlockSums | None:
        f = self._file(ts)
        if not f.exists():
            return None
        try:
            with np.load(f, allow_pickle=False) as z:
                arrays = {k: z[k] for k in z.files}
        except (OSError, ValueError):  # unreadable: compute the block again
            return None
        return BlockSums.from_arrays(arrays, where=f"The folder {str(self.path)!r}")

    def save(self, ts: slice, result: BlockSums) -> None:
        f = self._file(ts)
        tmp = f.with_name(f".{f.name}.{uuid.uuid4().hex}.tmp")
        with open(tmp, "wb") as fh:
            np.savez(fh, **result.to_arrays())
        os.replace(tmp, f)

    def remove(self) -> None:
        shutil.rmtree(self.path, ignore_errors=True)


def _atomic_write_text(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


# -- schedulers ------------------------------------------------------------------------------
def is_cluster(scheduler) -> bool:
    """True when ``scheduler`` names a dask.distributed cluster (an address or a Client)."""
    if scheduler is None:
        return False
    if isinstance(scheduler, str):
        return "://" in scheduler
    return hasattr(scheduler, "submit") and hasattr(scheduler, "scheduler_info")


def _check_scheduler(scheduler):
    if scheduler is None or is_cluster(scheduler):
        return
    if isinstance(scheduler, str) and scheduler in ("threads", "sync", "synchronous"):
        return
    raise RequestError(
        f"Unknown scheduler {scheduler!r}; give a dask.distributed address such as tcp://127.0.0.1:8786, "
        "a distributed.Client, 'threads' or 'sync'."
    )


def _client(scheduler):
    """(client, owned): connect to an address, or use the Client given."""
    if not isinstance(scheduler, str):
        return scheduler, False
    from distributed import Client

    try:
        return Client(scheduler, timeout="10s", set_as_default=False), True
    except (OSError, TimeoutError) as exc:
        raise RequestError(
            f"Cannot reach the dask scheduler at {scheduler} ({str(exc).splitlines()[0][:160]}); start it "
            "(e.g. `dask scheduler` and `dask worker ADDRESS`) or check the address."
        ) from None


def _blocks(nt: int, chunk: int) -> list[slice]:
    chunk = max(1, int(chunk))
    return [slice(t0, min(nt, t0 + chunk)) for t0 in range(0, nt, chunk)]


def _call_block(func, start: int, stop: int):
    # top-level (picklable) so a cluster worker can run it
    return func(slice(start, stop))


def run_blocks(func, nt: int, chunk: int, progress=None, scheduler=None, store=None, key: str = "",
               keep_store: bool = False) -> list:
    """Results of ``func(slice)`` for consecutive time blocks of ``chunk`` steps, in order.

    ``scheduler``: None/"threads" (local threads), "sync", a dask.distributed address or Client.
    ``store``: a folder to keep finished blocks in (resume after an interruption); it is
    removed after a complete run unless ``keep_store``. ``key`` names the job in the store.
    """
    _check_scheduler(scheduler)
    blocks = _blocks(nt, chunk)
    bs = BlockStore(store, key) if store is not None else None
    results: list = [None] * len(blocks)
    done = 0
    if bs is not None:
        for i, ts in enumerate(blocks):
            r = bs.load(ts)
            if r is not None:
                results[i] = r
                done += ts.stop - ts.start
    todo = [i for i, r in enumerate(results) if r is None]
    state = {"done": done}

    def finished(i, res):
        results[i] = res
        if bs is not None:
            bs.save(blocks[i], res)
        state["done"] += blocks[i].stop - blocks[i].start
        if progress is not None:
            progress(state["done"], nt)

    if progress is not None:
        progress(done, nt)
    try:
        if not todo:
            pass
        elif is_cluster(scheduler):
            _run_cluster(func, blocks, todo, scheduler, finished)
        elif scheduler in ("sync", "synchronous") or len(todo) == 1:
            for i in todo:
                finished(i, func(blocks[i]))
        else:
            _run_threads(func, blocks, todo, finished)
    except KeyboardInterrupt:
        raise Interrupted(state["done"], nt, str(bs.path) if bs is not None else None) from None
    if bs is not None and not keep_store:
        bs.remove()
    return results


def _run_threads(func, blocks, todo, finished) -> None:
    """dask's local threaded scheduler; one task per block, results handled in this thread."""
    import dask.threaded
    from dask.callbacks import Callback

    name = f"fluxfence-block-{uuid.uuid4().hex[:8]}"
    dsk = {(name, i): (_call_block, func, blocks[i].start, blocks[i].stop) for i in todo}

    def posttask(key, result, dsk_, state, worker_id):
        # dask calls this in the scheduling (calling) thread, once per finished task
        finished(key[1], result)

    # callbacks passed explicitly: they see only these tasks, not nested or other computations
    dask.threaded.get(dsk, list(dsk), callbacks=[Callback(posttask=posttask)._callback])


def _run_cluster(func, blocks, todo, scheduler, finished) -> None:
    from distributed import as_completed

    client, owned = _client(scheduler)
    futures = []
    try:
        fn = client.scatter(func, hash=False)  # the fields and stencil travel once
        tag = uuid.uuid4().hex[:8]
        index = {}
        for i in todo:
            fut = client.submit(_call_block, fn, blocks[i].start, blocks[i].stop, key=f"fluxfence-block-{tag}-{i}", pure=False)
            index[fut.key] = i
            futures.append(fut)
        for fut in as_completed(futures, loop=client.loop):
            try:
                res = fut.result()
            except OSError as exc:  # typically: the workers do not see the input files
                raise RequestError(
                    f"A worker of the dask cluster could not read the input ({str(exc).splitlines()[0][:200]}); "
                    "the workers need the same input paths as this machine (a shared file system), "
                    "or run without a scheduler."
                ) from None
            finished(index[fut.key], res)
    except BaseException:
        if futures:
            try:
                client.cancel(futures)
            except Exception:  # noqa: BLE001 - the cluster may be gone already
                pass
        raise
    finally:
        if owned:
            client.close()
