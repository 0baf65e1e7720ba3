"""The fork server that scan workers come from.

This module imports nothing heavy, so that ``bivocab build`` can start the server before it
loads numpy and pyarrow itself: the server's own imports then run beside the build's.
"""

from __future__ import annotations

import multiprocessing
import multiprocessing.context
import multiprocessing.forkserver

# What the server imports once, before it forks any worker.
PRELOAD = ["bivocab.scan"]


def worker_context() -> multiprocessing.context.BaseContext:
    """Workers come from a fork server: cheap to start, and never a fork of a parent whose
    library thread pools (pyarrow, tokenizers) are already running."""
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(PRELOAD)
    return ctx


def start_worker_server() -> None:
    """Start the fork server now (it imports the scan modules while the caller goes on with
    other work, e.g. loading its own modules and hashing the inputs), so that the first
    workers start without waiting."""
    worker_context()
    multiprocessing.forkserver.ensure_running()
