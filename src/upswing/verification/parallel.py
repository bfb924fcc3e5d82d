"""Run rollouts in fixed blocks: serially, on a local process pool, or on a Dask cluster.

Rollouts are cut into blocks of :data:`BLOCK` (the unit of reproducibility: block b's sensor noise comes from the
generator ``(seed, stream, b)``, see :mod:`upswing.verification.simulate`). Blocks are independent, so the results
are the same, bit for bit, whether blocks run in one process, a local pool or on cluster workers, and in whatever
order they finish. Memory stays flat: a worker holds one block's arrays at a time, and only per-rollout summaries
come back.

``dask.distributed`` is needed only with a scheduler address (``pip install 'upswing[cluster]'``); ``tqdm`` draws
the progress bar on stderr when asked.
"""

from __future__ import annotations

import multiprocessing
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from typing import Any

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import Rig
from upswing.verification.controllers import Controller
from upswing.verification.simulate import Rollouts, SimulationSetup, simulate

BLOCK = 1024  # rollouts per block; changing it changes which noise each rollout sees (not the statistics)


@dataclass(frozen=True)
class Task:
    """One block: everything a worker needs (picklable)."""

    rig: Rig
    controller: Any
    x0: np.ndarray
    params: np.ndarray
    setup: SimulationSetup
    seed: int
    stream: int
    block: int
    first_id: int


def run_task(task: Task) -> Rollouts:
    """Simulate one block (the function pool and cluster workers call)."""
    ids = np.arange(task.first_id, task.first_id + task.x0.shape[0])
    return simulate(task.rig, task.controller, task.x0, task.params, setup=task.setup, seed=task.seed,
                    stream=task.stream, block=task.block, ids=ids)


def _progress(total: int, enabled: bool):
    if not enabled:
        return None
    try:
        from tqdm import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency; stay quiet without it
        return None
    return tqdm(total=total, unit="rollout", file=sys.stderr, leave=False, dynamic_ncols=True)


def run_rollouts(rig: Rig, controller: Controller, x0: np.ndarray, params: np.ndarray, *,
                 setup: SimulationSetup, seed: int, stream: int, workers: int | None = None,
                 scheduler: str | None = None, progress: bool = False) -> tuple[Rollouts, float]:
    """Simulate all rollouts in blocks and join the results in rollout order.

    Parameters
    ----------
    x0 : ndarray (N, n_states)
    params : ndarray (N, 16)
    workers : int, optional
        Local processes (default: the machine's cores; 1 runs in this process).
    scheduler : str, optional
        A ``dask.distributed`` scheduler address (``tcp://host:8786``); the blocks then run on that cluster.
    progress : bool
        Draw a progress bar on stderr.

    Returns
    -------
    (Rollouts, float)
        The results and the wall time spent simulating [s].
    """
    N = x0.shape[0]
    if N < 1:
        raise RequestError(f"the number of rollouts must be at least 1; got {N}")
    tasks = [Task(rig, controller, x0[b:b + BLOCK], params[b:b + BLOCK], setup, seed, stream, b // BLOCK, b)
             for b in range(0, N, BLOCK)]
    bar = _progress(N, progress)
    results: dict[int, Rollouts] = {}
    start = time.perf_counter()

    def done(task: Task, result: Rollouts) -> None:
        results[task.block] = result
        if bar is not None:
            bar.update(task.x0.shape[0])

    try:
        if scheduler:
            _run_on_cluster(tasks, scheduler, done)
        else:
            n_workers = min(len(tasks), workers or os.cpu_count() or 1)
            if n_workers <= 1:
                for task in tasks:
                    done(task, run_task(task))
            else:
                _warm_up(tasks[0])
                methods = multiprocessing.get_all_start_methods()
                context = multiprocessing.get_context("fork" if "fork" in methods else "spawn")
                with ProcessPoolExecutor(max_workers=n_workers, mp_context=context) as pool:
                    futures = {pool.submit(run_task, task): task for task in tasks}
                    for future in as_completed(futures):
                        done(futures[future], future.result())
    finally:
        if bar is not None:
            bar.close()
    seconds = time.perf_counter() - start
    return Rollouts.concatenate([results[i] for i in range(len(tasks))]), seconds


def _warm_up(task: Task) -> None:
    """Compile (or load) the kernels once in this process, so forked workers inherit them."""
    tiny = SimulationSetup(horizon=1.0 / task.controller.sample_rate, substeps=1, backend=task.setup.backend)
    simulate(task.rig, task.controller, task.x0[:1], task.params[:1], setup=tiny)


def _run_on_cluster(tasks: list[Task], address: str, done) -> None:
    try:
        from dask.distributed import Client
    except ImportError:
        raise RequestError("--scheduler needs dask.distributed; install it with pip install 'upswing[cluster]'") \
            from None
    try:
        client = Client(address, timeout="20s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise RequestError(f"cannot reach the Dask scheduler at {address!r} ({exc}); start one with "
                           "`dask scheduler` and give its tcp:// address") from None
    try:
        futures = client.map(run_task, tasks, pure=False)
        for future, task in zip(futures, tasks, strict=True):  # in block order; all run meanwhile
            done(task, future.result())
    finally:
        client.close()
