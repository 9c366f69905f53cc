"""``equiscan batch`` on a Dask cluster: one task per tile.

:func:`extract` plans the run in this process exactly as ``equiscan batch`` does (inputs
expanded, headers read, each tile's halo neighbours found from the header bounds, OUTDIR and
its journal made, outputs finished before checked and skipped), then submits one task per
tile still to do to a ``dask.distributed`` cluster. Each task runs the library's
``run_tile`` on a worker: it reads the tile and its halo, writes the output atomically and
its journal record. The files, the journal and the resume are those of the CLI, so a run
can be resumed by either, and shards (``shard="K/N"``) can run on several clusters into one
OUTDIR.

Needs ``dask[distributed]`` (``pip install "tools/python[dask]"``). Every worker must see the
inputs and OUTDIR at the same paths as the client (a shared file system), and have this
package installed.
"""

import json
import os
import uuid
import warnings

from . import _native, _radii
from .errors import Error


class BatchNote(UserWarning):
    """A note of the plan: a file skipped, a tile in another CRS, a tile redone."""


def _run_tile(plan_json, index, threads):
    """The task: runs one tile on a worker. Returns ``(index, outcome_json, None, None)``,
    or ``(index, None, message, kind)`` for a tile that failed (its error is the tile's,
    not the run's: the other tiles go on, as in the CLI)."""
    try:
        return index, _native.batch_run_tile(plan_json, index, threads), None, None
    except Error as e:
        return index, None, str(e), e.kind


def _inputs(paths):
    if isinstance(paths, (str, bytes, os.PathLike)):
        paths = [paths]
    return [os.fspath(p) for p in paths]


def extract(
    paths,
    outdir,
    radius,
    format="npy",
    client=None,
    *,
    degree=_native.DEFAULT_DEGREE,
    shells=_native.DEFAULT_SHELLS,
    descriptor_version=_native.DESCRIPTOR_VERSION,
    max_neighbours=None,
    invariants="norms,power",
    keep_coefficients=False,
    tile_grid="auto",
    shard=None,
    restart=False,
    threads_per_task=1,
):
    """Feature files for every tile of ``paths``, one Dask task per tile.

    ``paths``: LAS, LAZ or PLY files, folders (their point-cloud files) or glob patterns, as
    for ``equiscan batch``. ``outdir``: the output folder (made when missing): one
    ``<input stem>.<format>`` per input and the journal folder ``equiscan-journal/``.
    ``radius`` (file units; a list for several scales; the largest is the halo width),
    ``format`` (``npy``, ``csv``, ``ply``, ``las``, ``laz`` or ``parquet``) and the keyword
    options mean what the CLI's options of the same names mean (``tile_grid="off"``: every
    input alone; ``shard="K/N"``: the K-th input of the sorted list and every N-th after it;
    ``restart=True``: redo every tile whatever the journal says).

    ``client``: a ``dask.distributed.Client``; left out, a ``LocalCluster`` with one worker
    process per core (one thread each) is started for the run and closed after it.
    ``threads_per_task``: worker threads of each tile's Rust computation (default 1, so that
    the cluster's parallelism is its number of worker threads; the output bytes are the same
    for any value).

    Returns the summary, the fields of ``equiscan batch --json``: ``tiles``, ``done``,
    ``skipped``, ``failed``, ``points``, ``halo_points``, ``seconds``,
    ``points_per_second``, ``failures`` (each ``input`` with its one-line ``error``) and
    ``warnings``, plus ``exit_code`` (0 when every tile is done, now or before; 1 otherwise,
    as the CLI exits). A failed tile does not stop the others; it is in the journal and in
    ``failures``. A bad argument, an OUTDIR that is a file or a journal made with other
    settings (without ``restart=True``) raises :class:`equiscan.RecipeError` or another
    :class:`equiscan.Error` before any task is submitted. The plan's notes are issued as
    :class:`BatchNote` warnings.
    """
    run = _native.BatchRun(
        _inputs(paths),
        os.fspath(outdir),
        radius=_radii(radius),
        degree=degree,
        shells=shells,
        descriptor_version=descriptor_version,
        max_neighbours=max_neighbours,
        invariants=invariants,
        keep_coefficients=keep_coefficients,
        format=format,
        tile_grid=tile_grid,
        shard=shard,
        restart=restart,
    )
    for note in run.notes:
        warnings.warn(note, BatchNote, stacklevel=2)
    todo = run.todo
    if todo:
        from distributed import Client, LocalCluster, as_completed

        own = client is None
        if own:
            cluster = LocalCluster(
                n_workers=os.cpu_count() or 1,
                threads_per_worker=1,
                processes=True,
                dashboard_address=":0",
            )
            client = Client(cluster)
        try:
            plan = client.scatter(run.plan_json(), broadcast=True, hash=False)
            tag = uuid.uuid4().hex[:8]
            futures = [
                client.submit(
                    _run_tile,
                    plan,
                    i,
                    threads_per_task,
                    key=f"equiscan-tile-{i}-{tag}",
                    pure=False,
                )
                for i in todo
            ]
            index_of = {f.key: i for f, i in zip(futures, todo)}
            for future in as_completed(futures):
                i = index_of[future.key]
                try:
                    _, outcome, error, kind = future.result()
                except Exception as e:  # the worker died or the task could not run
                    outcome, kind = None, "internal"
                    error = (
                        f"{run.input_of(i)}: the task running this tile failed "
                        f"({type(e).__name__}: {e}); run again to redo it"
                    )
                run.add(i, outcome=outcome, error=error, kind=kind)
        finally:
            if own:
                client.close()
                cluster.close()
    summary = json.loads(run.summary_json())
    summary["exit_code"] = run.exit_code()
    return summary


__all__ = ["extract", "BatchNote"]
