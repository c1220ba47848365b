"""Run independent training jobs side by side on spawned CPU processes (plain Python, no Lightning).

Each job is ``fn(*args)`` with its own seeding, so the results are the same as in one process;
only the wall time changes. Spawned (not forked) workers start clean of the parent's torch
threads and Lightning state.
"""
from __future__ import annotations

import multiprocessing as mp
from concurrent.futures import ProcessPoolExecutor
from typing import Callable, Sequence

import torch

from ..allocator import keep_freed_memory


def _call(item: tuple) -> object:
    fn, threads, args = item
    torch.set_num_threads(int(threads))
    keep_freed_memory()  # a spawned process starts with glibc's defaults (closure_nn/allocator.py)
    return fn(*args)


def map_in_processes(fn: Callable, jobs: Sequence[tuple], processes: int, threads: int = 1) -> list:
    """``[fn(*a) for a in jobs]``, on ``min(processes, len(jobs))`` spawned processes when that is
    more than one (``fn`` must be a module-level function), each with ``threads`` torch threads.

    >>> map_in_processes(divmod, [(7, 2), (9, 4)], processes=1)
    [(3, 1), (2, 1)]
    """
    if processes <= 1 or len(jobs) <= 1:
        return [fn(*a) for a in jobs]
    with ProcessPoolExecutor(max_workers=min(processes, len(jobs)), mp_context=mp.get_context("spawn")) as pool:
        return list(pool.map(_call, [(fn, threads, tuple(a)) for a in jobs]))
