"""Run a campaign's chunks on local processes or a Dask cluster, resumably.

A chunk is a pure function of (configuration, chunk row, the chunk's
injections): the *worker* builds the chunk's noise, injects, filters and
returns tables.  This module plans the campaign into an output folder, runs
every unfinished chunk (in this process, on a
:class:`concurrent.futures.ProcessPoolExecutor`, or on an existing
``distributed`` cluster), writes each chunk's tables atomically the moment
it finishes, and then assembles the final tables.

Output folder layout::

    campaign.json          hash of the normalised config, version, plan sizes
    campaign.toml          the campaign file as given
    plan/chunks.parquet    the units of work
    plan/injections.parquet  every drawn injection (true parameters)
    chunks/NNNNNN.<table>.parquet  a finished chunk's tables ...
    chunks/NNNNNN.done     ... and its completion marker (written last)
    shared/                what every chunk reuses, written once (the worker's
                           ``share`` hook: e.g. its template banks)
    injections.parquet, found.parquet, background.parquet, efficiency.csv, ...

Resume: a chunk counts as finished only when its ``.done`` marker exists, so
a run killed at any moment loses at most the chunks in flight, and the
marker is written after the tables, so no partial chunk is ever read.
"""

from __future__ import annotations

import json
import os
import sys
import time
from collections.abc import Callable
from importlib import import_module
from pathlib import Path
from typing import Any

import pandas as pd

from ringsearch import __version__
from ringsearch.campaign.draw import plan_campaign
from ringsearch.campaign.spec import CampaignSpec
from ringsearch.errors import InputError
from ringsearch.files import atomic_path, staged_directory, write_json

#: A worker: (config dict, chunk row dict, the chunk's injections) -> named tables.
Worker = Callable[[dict, dict, pd.DataFrame], dict[str, pd.DataFrame]]

#: Dotted path of the worker used when none is given.
DEFAULT_WORKER = "ringsearch.campaign.worker:run_chunk"

#: Seconds to wait for a Dask scheduler before giving up.
SCHEDULER_TIMEOUT_S = 10.0

MANIFEST = "campaign.json"

#: Folder (inside a campaign's output) of what every chunk shares, written once.
SHARED = "shared"


def resolve_worker(worker: Worker | str | None) -> Worker:
    """Turn ``"module:function"`` (or None for the default) into the callable."""
    if worker is None:
        worker = DEFAULT_WORKER
    if callable(worker):
        return worker
    module, _, name = worker.partition(":")
    return getattr(import_module(module), name)


def _chunk_name(index: int) -> str:
    return f"{int(index):06d}"


def chunk_done(out: Path, index: int) -> bool:
    return (Path(out) / "chunks" / f"{_chunk_name(index)}.done").exists()


def read_manifest(out: str | Path) -> dict:
    """Read an output folder's ``campaign.json``."""
    path = Path(out) / MANIFEST
    if not path.is_file():
        raise InputError(f"{out} is not a campaign output folder (no {MANIFEST}).")
    try:
        return json.loads(path.read_text())
    except json.JSONDecodeError:
        raise InputError(f"{path} is not valid JSON; the folder is damaged.") from None


def _segments_for(spec: CampaignSpec):
    if spec.data["source"] == "synthetic":
        return None
    from ringsearch.campaign.worker import analysable_segments

    return analysable_segments(spec.config)


def prepare_output(spec: CampaignSpec, out: str | Path,
                   check: Callable[[dict], None] | None = None) -> dict:
    """Create the output folder with the plan, or check an existing one matches ``spec``.

    ``check(config)`` runs after the plan is drawn and before anything is
    written (for a new folder) or before unfinished chunks resume.  Returns
    the manifest.  Raises InputError when ``out`` holds another campaign, a
    campaign with a changed configuration, or unrelated files.

    Examples
    --------
    >>> manifest = prepare_output(spec, "out/quick")  # doctest: +SKIP
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"output path {out} exists and is not a folder.")
    if out.exists() and any(out.iterdir()):
        if not (out / MANIFEST).is_file():
            raise InputError(f"output folder {out} is not empty and holds no campaign; "
                             f"choose a new --out folder.")
        manifest = read_manifest(out)
        if manifest.get("config_hash") != spec.config_hash:
            name = manifest.get("name", "?")
            raise InputError(
                f"output folder {out} holds campaign '{name}' run with a different "
                f"configuration (hash {str(manifest.get('config_hash'))[:12]} vs "
                f"{spec.config_hash[:12]}); resume only with the same file or choose a "
                f"new --out folder.")
        if check is not None and pending_chunks(out):
            check(spec.config)
        return manifest
    chunks, injections = plan_campaign(spec, _segments_for(spec))
    if check is not None:
        check(spec.config)
    manifest = {
        "name": spec.config["campaign"]["name"],
        "config_hash": spec.config_hash,
        "ringsearch_version": __version__,
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "n_chunks": len(chunks),
        "n_injections": len(injections),
        "config": spec.config,
        "source": spec.source,
    }
    # Build in a hidden sibling and move it into place: the folder appears whole.
    with staged_directory(out) as stage:
        (stage / "plan").mkdir()
        (stage / "chunks").mkdir()
        chunks.to_parquet(stage / "plan" / "chunks.parquet", index=False)
        injections.to_parquet(stage / "plan" / "injections.parquet", index=False)
        (stage / "campaign.toml").write_text(spec.text or "")
        write_json(stage / MANIFEST, manifest, sort_keys=True)
    return manifest


def load_plan(out: str | Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The (chunks, injections) plan of a campaign folder."""
    out = Path(out)
    return (pd.read_parquet(out / "plan" / "chunks.parquet"),
            pd.read_parquet(out / "plan" / "injections.parquet"))


def pending_chunks(out: str | Path) -> list[int]:
    """Indices of chunks without a completion marker."""
    chunks, _ = load_plan(out)
    return [int(c) for c in chunks["chunk"] if not chunk_done(Path(out), int(c))]


def run_chunk_task(config: dict, chunk: dict, injections: pd.DataFrame,
                   worker: Worker | str | None = None) -> dict[str, Any]:
    """Run one chunk (in whatever process it lands, with one BLAS thread) and time it.

    Returns ``{"chunk": index, "tables": {...}, "wall_s": .., "cpu_s": ..}``.
    """
    from threadpoolctl import threadpool_limits

    fn = resolve_worker(worker)
    wall, cpu = time.perf_counter(), time.process_time()
    # one linear-algebra thread: a chunk's numbers then do not depend on the machine's
    # thread count (local and Dask results are bit-identical), and parallel workers do
    # not compete for cores with their own BLAS threads
    with threadpool_limits(limits=1):
        tables = fn(config, chunk, injections)
    return {"chunk": int(chunk["chunk"]), "tables": tables,
            "wall_s": time.perf_counter() - wall, "cpu_s": time.process_time() - cpu,
            "host": os.uname().nodename, "pid": os.getpid()}


def save_chunk(out: str | Path, result: dict) -> None:
    """Write one finished chunk's tables atomically, then its marker."""
    folder = Path(out) / "chunks"
    name = _chunk_name(result["chunk"])
    for table, frame in result["tables"].items():
        with atomic_path(folder / f"{name}.{table}.parquet") as tmp:
            frame.to_parquet(tmp, index=False)
    meta = {k: v for k, v in result.items() if k != "tables"}
    meta["tables"] = sorted(result["tables"])
    write_json(folder / f"{name}.done", meta, indent=None, sort_keys=True)


def _connect(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--scheduler needs the 'distributed' package "
                         "(pip install 'ringsearch[cluster]').") from None
    try:
        return Client(address, timeout=f"{SCHEDULER_TIMEOUT_S}s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"the Dask scheduler at {address} did not answer within "
                         f"{SCHEDULER_TIMEOUT_S:.0f} s ({type(exc).__name__}).") from None


def _progress(total: int, initial: int, enabled: bool):
    from tqdm.auto import tqdm

    return tqdm(total=total, initial=initial, unit="chunk", desc="campaign",
                disable=(not enabled) or None, file=sys.stderr, dynamic_ncols=True)


def run_campaign(spec: CampaignSpec, out: str | Path, *, workers: int = 1,
                 scheduler: str | Any | None = None, worker: Worker | str | None = None,
                 progress: bool = True, max_chunks: int | None = None,
                 finalize: bool = True) -> dict:
    """Run (or resume) a campaign into ``out`` and assemble its tables.

    Parameters
    ----------
    spec : CampaignSpec
        The validated campaign.
    out : path
        Output folder; created, or resumed if it holds the same campaign.
    workers : int
        Local worker processes (1 runs in this process).  Ignored with ``scheduler``.
        They are spawned, so a script that asks for more than one must call
        `run_campaign` under ``if __name__ == "__main__":``.
    scheduler : str or distributed.Client, optional
        Address of a running Dask scheduler (``tcp://host:8786``), or a client.
    worker : callable or "module:function", optional
        The chunk worker; the real search by default.  Tests pass fakes here.
    progress : bool
        Show a progress bar on stderr (when it is a terminal).
    max_chunks : int, optional
        Stop after this many chunks in this call (for staged runs).
    finalize : bool
        Assemble the final tables when every chunk is done.

    Returns
    -------
    dict
        The campaign status (see :func:`campaign_status`).

    Examples
    --------
    >>> from ringsearch.campaign.spec import load_spec
    >>> status = run_campaign(load_spec("injections/quick.toml"), "out/quick",
    ...                       workers=2)  # doctest: +SKIP
    """
    if workers < 1:
        raise InputError(f"--workers must be at least 1, not {workers}.")
    client = None
    own_client = False
    pool = None
    if scheduler is not None:
        if isinstance(scheduler, str):
            client, own_client = _connect(scheduler), True
        else:
            client = scheduler
    try:
        fn = resolve_worker(worker)  # fail early on a bad dotted path
        out = Path(out)
        # the worker's own up-front checks (e.g. banks), before any chunk runs
        module = sys.modules.get(fn.__module__)
        hook = getattr(module, "prepare", None)
        prepare_output(spec, out, check=hook if callable(hook) else None)
        chunks, injections = load_plan(out)
        n_todo = sum(not chunk_done(out, c) for c in chunks["chunk"])
        if max_chunks is not None:
            n_todo = min(n_todo, max_chunks)
        if client is None and workers > 1 and n_todo > 1:
            # local workers start now: their imports overlap the fixed costs below
            pool = _start_pool(min(workers, n_todo), fn)
        # fixed costs paid once: the worker may write what every chunk shares (e.g. its
        # template banks) into DIR/shared and tell the chunks where it is
        share = getattr(module, "share", None)
        shared = share(spec.config, out / SHARED) if callable(share) else None
        todo = [c for c in chunks.to_dict("records") if not chunk_done(out, c["chunk"])]
        # the longest units first (background units search whole stretches with their
        # slides), so parallel workers do not wait on one at the end
        todo.sort(key=lambda c: c.get("kind") != "background")
        if max_chunks is not None:
            todo = todo[:max_chunks]
        groups = dict(tuple(injections.groupby("chunk")))
        bar = _progress(len(chunks), len(chunks) - len(pending_chunks(out)), progress)
        try:
            args = [(spec.config, {**c, "shared": shared} if shared else c,
                     groups[c["chunk"]].reset_index(drop=True) if c["chunk"] in groups
                     else injections.iloc[:0]) for c in todo]
            if client is not None:
                _run_dask(client, args, worker, out, bar)
            elif pool is None:
                for a in args:
                    save_chunk(out, run_chunk_task(*a, worker=worker))
                    bar.update(1)
            else:
                _run_pool(pool, args, worker, out, bar)
        finally:
            bar.close()
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
        if own_client:
            client.close()
    if finalize and not pending_chunks(out):
        from ringsearch.campaign.results import assemble

        assemble(out)
    return campaign_status(out)


def _warm(module: str) -> None:
    """Import the chunk worker's module in a fresh worker process, and its ``warm`` hook."""
    import importlib

    hook = getattr(importlib.import_module(module), "warm", None)
    if callable(hook):
        hook()


def _start_pool(workers: int, fn: Worker):
    """A pool of ``workers`` local processes, started now and importing ``fn``'s module.

    Forked children would inherit locks held by threads (tqdm, BLAS); spawn is
    safe.  The processes persist until the campaign ends, so each pays its
    imports and caches (banks, PSDs) once.
    """
    import concurrent.futures as cf
    import multiprocessing

    pool = cf.ProcessPoolExecutor(max_workers=workers,
                                  mp_context=multiprocessing.get_context("spawn"),
                                  initializer=_warm, initargs=(fn.__module__,))
    for _ in range(workers):  # spawn every process now, not at the first chunk
        pool.submit(int)
    return pool


def _script_hint() -> str:
    """A hint for the commonest death of spawned workers: a script without a main guard.

    Spawned workers re-run the calling script; one that calls `run_campaign` at its
    top level starts a campaign inside each worker, and the worker dies.
    """
    main = sys.modules.get("__main__")
    path = getattr(main, "__file__", None)
    if (path is None or not path.endswith(".py")
            or Path(path).resolve().is_relative_to(Path(__file__).resolve().parents[1])):
        return ""  # a notebook, the ringsearch command or python -m ringsearch
    return (f" (if {Path(path).name} calls run_campaign at its top level, put the call "
            "under `if __name__ == \"__main__\":`, which worker processes need)")


def _run_pool(pool, args, worker, out: Path, bar) -> None:
    import concurrent.futures as cf

    futures = [pool.submit(run_chunk_task, *a, worker=worker) for a in args]
    try:
        for fut in cf.as_completed(futures):
            save_chunk(out, fut.result())
            bar.update(1)
    except cf.process.BrokenProcessPool:
        for f in futures:
            f.cancel()
        # not the user's input, but the CLI must still say one sentence, not a traceback
        raise InputError(f"a worker process of the campaign in {out} died (killed, or "
                         "out of memory); finished chunks are kept, so run the same "
                         "command again to resume, perhaps with fewer --workers"
                         f"{_script_hint()}.") from None
    except BaseException:
        for f in futures:
            f.cancel()
        raise


def _run_dask(client, args, worker, out: Path, bar) -> None:
    from distributed import as_completed

    futures = [client.submit(run_chunk_task, *a, worker=worker, pure=False) for a in args]
    try:
        for fut in as_completed(futures):
            save_chunk(out, fut.result())
            bar.update(1)
    except BaseException:
        client.cancel(futures)
        raise


def campaign_status(out: str | Path) -> dict:
    """How far a campaign is.

    Returns
    -------
    dict
        ``name, config_hash, n_chunks, chunks_done, n_injections,
        injections_done, complete, assembled, cpu_s, wall_s``.

    Examples
    --------
    >>> campaign_status("out/quick")["complete"]  # doctest: +SKIP
    True
    """
    out = Path(out)
    manifest = read_manifest(out)
    chunks, _ = load_plan(out)
    done = [c for c in chunks.itertuples() if chunk_done(out, c.chunk)]
    cpu = wall = 0.0
    for c in done:
        meta = json.loads((out / "chunks" / f"{_chunk_name(c.chunk)}.done").read_text())
        cpu += meta.get("cpu_s", 0.0)
        wall += meta.get("wall_s", 0.0)
    return {
        "name": manifest.get("name"),
        "config_hash": manifest.get("config_hash"),
        "n_chunks": int(len(chunks)),
        "chunks_done": len(done),
        "n_injections": int(chunks["n_injections"].sum()),
        "injections_done": int(sum(c.n_injections for c in done)),
        "complete": len(done) == len(chunks),
        "assembled": (out / "efficiency.csv").exists(),
        "cpu_s": cpu,
        "chunk_wall_s": wall,
    }
