"""Where sweep runs are computed: local processes (default, no server) or a Ray cluster.

Both yield each run's result as soon as it is ready; the driver writes it. Results do not depend
on the backend or the worker count, since each run is computed from its own seeds alone.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import socket
import time
from collections.abc import Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any

from shortcut_gym.envs.errors import ShortcutGymError
from shortcut_gym.lab.sweep.run import compute_run, compute_runs

#: Most runs in one Ray task (see :meth:`RayBackend.run`).
MAX_RUNS_PER_TASK = 16
#: Seconds to wait for a Ray head's port before giving up.
RAY_CONNECT_TIMEOUT_S = 3.0


class BackendError(ShortcutGymError, RuntimeError):
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
        #: Seconds this process spent warming up before forking workers (see :meth:`run`).
        self.warm_up_s = 0.0

    def start(self) -> None:
        """Nothing to start for local processes."""

    def run(self, runs: list[dict[str, Any]]) -> Iterator[dict[str, Any]]:
        """Yield each run's result as it completes.

        Before forking the workers, this process runs a tiny copy of each distinct agent's first
        run (:func:`warm_up_copy`), so the compiled functions are loaded once and every forked
        worker inherits them instead of loading them again; the seconds are in ``warm_up_s``.
        """
        if self.workers == 1 or len(runs) <= 1:
            for run in runs:
                yield compute_run(run)
            return
        method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
        if method == "fork":
            start = time.perf_counter()
            compute_runs(warm_up_runs(runs))
            self.warm_up_s += time.perf_counter() - start
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


class _RunWorker:
    """A Ray actor: one long-lived process per CPU that keeps the package imported and compiled."""

    def compute_runs(self, runs: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return compute_runs(runs)


def _failed(runs: list[dict[str, Any]], err: BaseException) -> list[dict[str, Any]]:
    """Failure results for runs whose worker was lost (the runs themselves may be fine)."""
    return [{"run_id": r["run_id"], "status": "failed", "error": f"worker lost: {type(err).__name__}: {err}",
             "traceback": "", "compute_s": 0.0, "plan_s": 0.0, "plan_wait_s": 0.0, "plans_made": 0, "plans_loaded": 0,
             "pid": None} for r in runs]


class RayBackend:
    """Runs on Ray actors (one per CPU): on a local Ray started here, or on the cluster at ``address``.

    Actors rather than plain tasks: Ray may retire idle task workers between sweeps, and each new
    worker imports the package and loads its compiled functions again (seconds per worker).
    """

    name = "ray"

    def __init__(self, workers: int | None = None, address: str | None = None) -> None:
        self.workers = check_workers(workers)
        self.address = address
        if address is not None:
            check_ray_reachable(address)
        self._started = False
        self._actors: list[Any] = []
        self._warm = False
        self.warm_up_s = 0.0  # the actors warm up in their own processes (not timed here)

    def start(self) -> None:
        """Start (or attach to) Ray; a failure to connect raises :class:`BackendError`."""
        import ray

        if not ray.is_initialized():
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
        self._ensure_actors()

    def _ensure_actors(self) -> None:
        import ray

        n = max(1, int(ray.cluster_resources().get("CPU", self.workers)))
        actor = ray.remote(num_cpus=1, max_restarts=0)(_RunWorker)
        while len(self._actors) < n:
            self._actors.append(actor.remote())

    def warm_up(self, run: dict[str, Any]) -> None:
        """Have each actor import the package and load its compiled functions once, on a tiny copy of
        ``run`` (one user, two trials), so start-up is not charged to the first real runs."""
        import ray

        self._ensure_actors()
        ray.get([a.compute_runs.remote([warm_up_copy(run)]) for a in self._actors])
        self._warm = True

    def run(self, runs: list[dict[str, Any]]) -> Iterator[dict[str, Any]]:
        """Hand the runs to the actors in groups, two groups in flight per actor; yield results as
        each group completes. A lost actor's runs come back failed and the actor is replaced.

        Groups hold about an eighth of a CPU's share of the runs (at most 16 runs): short runs then
        do not pay Ray's per-call cost one by one, and long sweeps still land in small steps.
        """
        import ray

        if not runs:
            return
        self._ensure_actors()
        if not self._warm:
            self.warm_up(runs[0])
        size = max(1, min(MAX_RUNS_PER_TASK, len(runs) // (8 * len(self._actors))))
        groups = [runs[i:i + size] for i in range(0, len(runs), size)]
        nxt = 0
        in_flight: dict[Any, tuple[int, list[dict[str, Any]]]] = {}

        def submit(slot: int) -> None:
            nonlocal nxt
            if nxt < len(groups):
                in_flight[self._actors[slot].compute_runs.remote(groups[nxt])] = (slot, groups[nxt])
                nxt += 1

        for slot in range(len(self._actors)):
            submit(slot)
            submit(slot)
        while in_flight:
            ready, _ = ray.wait(list(in_flight), num_returns=1)
            for ref in ready:
                slot, group = in_flight.pop(ref)
                try:
                    results = ray.get(ref)
                except ray.exceptions.RayError as err:
                    results = _failed(group, err)
                    if isinstance(err, ray.exceptions.RayActorError):
                        actor = ray.remote(num_cpus=1, max_restarts=0)(_RunWorker)
                        self._actors[slot] = actor.remote()
                submit(slot)
                yield from results

    def stop(self) -> None:
        """Shut Ray down if this backend started it; otherwise keep the warm actors for the next sweep."""
        if self._started:
            import ray

            ray.shutdown()
            self._started = False
            self._actors = []
            self._warm = False

    def close(self) -> None:
        """Kill the actors (for a Ray session this backend did not start)."""
        import ray

        if ray.is_initialized():
            for a in self._actors:
                ray.kill(a)
        self._actors = []
        self._warm = False
        self.stop()


def warm_up_copy(run: dict[str, Any]) -> dict[str, Any]:
    """A tiny copy of a run (one user, one session of two trials) whose result is thrown away."""
    settings = {**run["settings"], "schedule": {**run["settings"]["schedule"], "sessions": 1,
                                                "trials_per_session": 2, "gap_h": 1.0}}
    run = {k: v for k, v in run.items() if k != "plan_store"}  # the tiny world's plan stays out of the store
    return {**run, "run_id": "warm-up", "seeds": run["seeds"][:1], "settings": settings, "trial_tables": False,
            "warm_up": True}


def warm_up_runs(runs: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """:func:`warm_up_copy` of the first run of each distinct agent spec among ``runs``."""
    seen: dict[str, dict[str, Any]] = {}
    for run in runs:
        seen.setdefault(json.dumps(run["agent"], sort_keys=True, default=str), warm_up_copy(run))
    return list(seen.values())


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
