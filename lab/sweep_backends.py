"""Where sweep runs are computed: local processes (default, no server) or a Ray cluster.

Both yield each run's result as soon as it is ready; the driver writes it. Results do not depend
on the backend or the worker count, since each run is computed from its own seeds alone.
"""

from __future__ import annotations

import multiprocessing
import os
import socket
from collections.abc import Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any

from shortcut_gym.lab.sweep_run import compute_run, compute_runs

#: Most runs in one Ray task (see :meth:`RayBackend.run`).
MAX_RUNS_PER_TASK = 16
#: Seconds to wait for a Ray head's port before giving up.
RAY_CONNECT_TIMEOUT_S = 3.0


class BackendError(RuntimeError):
    """A backend cannot start (bad worker count, unreachable cluster); the message says why."""


def check_workers(workers: int | None) -> int:
    """The worker count (default: the machine's CPU count); < 1 raises naming the value."""
    if workers is None:
        return max(1, os.cpu_count() or 1)
    if int(workers) != workers or workers < 1:
        raise BackendError(f"workers must be a whole number >= 1, got {workers!r}")
    return int(workers)


class LocalBackend:
    """Runs in this process (1 worker) or in a pool of forked worker processes."""

    name = "local"

    def __init__(self, workers: int | None = None) -> None:
        self.workers = check_workers(workers)

    def start(self) -> None:
        """Nothing to start for local processes."""

    def run(self, runs: list[dict[str, Any]]) -> Iterator[dict[str, Any]]:
        """Yield each run's result as it completes."""
        if self.workers == 1 or len(runs) <= 1:
            for run in runs:
                yield compute_run(run)
            return
        method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
        with ProcessPoolExecutor(self.workers, mp_context=multiprocessing.get_context(method)) as pool:
            pending = {pool.submit(compute_run, run) for run in runs}
            while pending:
                done, pending = wait(pending, return_when=FIRST_COMPLETED)
                for fut in done:
                    yield fut.result()

    def stop(self) -> None:
        """Nothing to stop."""


def parse_ray_address(address: str) -> tuple[str, int] | None:
    """(host, port) of ``host:port`` or ``ray://host:port``; None for 'auto'. Bad forms raise."""
    if address == "auto":
        return None
    rest = address.split("://", 1)[1] if "://" in address else address
    host, sep, port = rest.rpartition(":")
    if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
        raise BackendError(f"Ray address {address!r} must look like host:port, ray://host:port or 'auto'")
    return host, int(port)


def check_ray_reachable(address: str, timeout_s: float = RAY_CONNECT_TIMEOUT_S) -> None:
    """Fail fast, with the reason, when nothing listens at a Ray cluster address."""
    target = parse_ray_address(address)
    if target is None:
        return
    try:
        with socket.create_connection(target, timeout=timeout_s):
            return
    except OSError as err:
        raise BackendError(f"cannot reach the Ray cluster at {address!r} within {timeout_s:g} s: {err}") from None


class RayBackend:
    """Runs as Ray tasks: on a local Ray started here, or on the cluster at ``address``."""

    name = "ray"

    def __init__(self, workers: int | None = None, address: str | None = None) -> None:
        self.workers = check_workers(workers)
        self.address = address
        if address is not None:
            check_ray_reachable(address)
        self._started = False
        self._warm = False

    def start(self) -> None:
        """Start (or attach to) Ray; a failure to connect raises :class:`BackendError`."""
        import ray

        if ray.is_initialized():
            return
        try:
            if self.address is None:
                ray.init(num_cpus=self.workers, include_dashboard=False, log_to_driver=False,
                         configure_logging=False)
            else:
                ray.init(address=self.address, log_to_driver=False, configure_logging=False)
        except (ConnectionError, RuntimeError, ValueError) as err:
            where = self.address or "this machine"
            raise BackendError(f"cannot start Ray on {where}: {err}") from None
        self._started = True

    def warm_up(self, run: dict[str, Any]) -> None:
        """Have each worker import the package and load its compiled functions once, on a tiny copy of
        ``run`` (one user, two trials), so start-up is not charged to the first real runs."""
        import ray

        n = max(1, int(ray.cluster_resources().get("CPU", self.workers)))
        task = ray.remote(num_cpus=1, max_retries=0)(compute_run)
        ray.get([task.remote(warm_up_copy(run)) for _ in range(n)])
        self._warm = True

    def run(self, runs: list[dict[str, Any]]) -> Iterator[dict[str, Any]]:
        """Submit the runs as Ray tasks of a few runs each; yield results as each task completes.

        Runs are grouped so that there are about eight tasks per CPU (at most 16 runs a task): short
        runs then do not pay Ray's per-task cost one by one, and long sweeps still land in small steps.
        """
        import ray

        if not self._warm and runs:
            self.warm_up(runs[0])
        cpus = max(1, int(ray.cluster_resources().get("CPU", self.workers)))
        size = max(1, min(MAX_RUNS_PER_TASK, len(runs) // (8 * cpus)))
        task = ray.remote(num_cpus=1, max_retries=0)(compute_runs)
        refs = [task.remote(runs[i:i + size]) for i in range(0, len(runs), size)]
        while refs:
            ready, refs = ray.wait(refs, num_returns=1)
            for ref in ready:
                yield from ray.get(ref)

    def stop(self) -> None:
        """Shut Ray down if this backend started it."""
        if self._started:
            import ray

            ray.shutdown()
            self._started = False


def warm_up_copy(run: dict[str, Any]) -> dict[str, Any]:
    """A tiny copy of a run (one user, one session of two trials) whose result is thrown away."""
    settings = {**run["settings"], "schedule": {**run["settings"]["schedule"], "sessions": 1,
                                                "trials_per_session": 2, "gap_h": 1.0}}
    return {**run, "run_id": "warm-up", "seeds": run["seeds"][:1], "settings": settings, "trial_tables": False,
            "warm_up": True}


def make_backend(name: str | LocalBackend | RayBackend, workers: int | None = None,
                 address: str | None = None) -> LocalBackend | RayBackend:
    """A backend by name ('local' or 'ray'), or a ready backend object; an address applies to Ray only."""
    if isinstance(name, (LocalBackend, RayBackend)):
        return name
    if name == "local":
        if address is not None:
            raise BackendError("an address applies to the ray backend only")
        return LocalBackend(workers)
    if name == "ray":
        return RayBackend(workers, address)
    raise BackendError(f"unknown backend {name!r}; choose 'local' or 'ray'")
