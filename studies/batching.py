"""How many points go into each batch a study run submits (client side, no dask here).

A batch is one dask task: it costs the client and the scheduler a round trip and the store a
transaction, about 10 ms of CPU on a 2-core machine whose cores the local workers share
(measured with ``filamant bench``). Few, large batches keep that small; but the run ends when
the last worker finishes, so the batches near the end must leave every worker thread done at
about the same time. :class:`BatchPlanner` does both:

1. **Probe.** Until a point's time is known, one batch of at most ``probe`` points per worker
   thread (an unknown design may take long), and behind each a follow-up: the rest of the
   thread's fair share, at most ``follow_up`` points. The thread runs it while the client
   hears of its probe and plans from its times (without it every thread stood idle for that
   round trip, 10-20 ms per thread on two local workers, measured with ``filamant bench``),
   and a short study needs no more batches (each costs the client and the workers several ms
   of CPU). The worker bounds its time: it starts no point after ``max_batch_s`` and hands
   back the rest (:func:`studies.runner.evaluate_batch`), which the runner queues again
   (:meth:`BatchPlanner.requeued`).
2. **Factoring.** Then each new batch takes ``1/(threads * in_flight)`` of the points left, at
   most ``target_batch_s`` of work and at least ``min_batch_s``, so the batches shrink as the
   queue empties (Hummel, Schonberg & Flynn, "Factoring: a method for scheduling parallel
   loops", Commun. ACM 35(8), 1992).
3. **Last round.** Once what is left fits in ``min_batch_s`` per thread, it is split at once
   into one batch per thread, sized so that every thread is predicted to finish at the same
   moment (:func:`water_fill`): a thread's free time is when its running batch started (when
   the client heard of a thread becoming free) plus that batch's work, with the queued batches
   handed to the threads first in, first out, at the median time per point.

The batches form one queue that the worker threads take from as they free, so a thread that
runs slower (on a shared machine one worker can be 20-30 % slower than the other within one
run) simply takes less. Pinning each batch to the thread predicted to be free first was
measured worse: ``two_worker_efficiency`` 0.78-0.81 against 0.82-0.87, alternated in one
session. The planner only counts; :func:`studies.runner.run_points` owns the futures and tells
it what went out and what came back.
"""

from __future__ import annotations

import heapq
import math
import statistics
from collections import deque
from collections.abc import Hashable
from dataclasses import dataclass, field

__all__ = ["BatchPlanner", "water_fill"]


def water_fill(free_s: list[float], points: int, per_s: float) -> list[int]:
    """Split ``points`` over threads free at ``free_s`` so that all end together.

    Parameters
    ----------
    free_s : list of float
        When each thread is predicted to be free, in s (any common origin).
    points : int
        Points to share out.
    per_s : float
        Time of one point in s (> 0).

    Returns
    -------
    list of int
        Points per thread, in the order of ``free_s``; they sum to ``points``. A thread free
        later gets fewer (none when it is busy past the common end).
    """
    if points <= 0 or not free_s:
        return [0] * len(free_s)
    order = sorted(range(len(free_s)), key=free_s.__getitem__)
    f = [free_s[i] for i in order]
    # the common end of the k earliest threads, (sum f[:k] + points * per) / k; while it is
    # later than the next thread's free time, that thread joins in
    k, end = 1, f[0] + points * per_s
    while k < len(f) and end > f[k]:
        k += 1
        end = (sum(f[:k]) + points * per_s) / k
    exact = [(end - f[j]) / per_s if j < k else 0.0 for j in range(len(f))]
    share = [math.floor(x) for x in exact]
    # the rounding remainder to the largest fractional parts
    for j in sorted(range(k), key=lambda j: share[j] - exact[j])[: points - sum(share)]:
        share[j] += 1
    out = [0] * len(free_s)
    for j, i in enumerate(order):
        out[i] = share[j]
    return out


@dataclass
class BatchPlanner:
    """Batch sizes for one run (see the module docstring for the rules).

    Parameters
    ----------
    target_batch_s : float
        Wanted work of one batch, in s.
    min_batch_s : float
        Least work of one batch but for the last round, in s.
    max_batch : int
        Most points in one batch.
    in_flight_per_worker : int
        Batches kept submitted per worker thread (running or queued).
    probe : int
        Points in each of the first batches, before any point's time is known.
    follow_up : int
        Most points in the batch queued behind each probe before any point's time is known
        (0: none, and the threads wait for the plan); never more than ``max_batch``.
    """

    target_batch_s: float = 1.0
    min_batch_s: float = 0.1
    max_batch: int = 64
    in_flight_per_worker: int = 2
    probe: int = 4
    follow_up: int = 64
    times: deque[float] = field(default_factory=lambda: deque(maxlen=256))
    _running: dict[Hashable, tuple[float, int]] = field(default_factory=dict)
    _waiting: deque[tuple[Hashable, int]] = field(default_factory=deque)
    _last_round: bool = False

    # -- what the runner reports ----------------------------------------------------------

    def submitted(self, key: Hashable, size: int, now: float, threads: int) -> None:
        """A batch of ``size`` points went out at ``now`` (s) to a cluster of ``threads``."""
        if len(self._running) < threads:
            self._running[key] = (now, size)
        else:
            self._waiting.append((key, size))

    def finished(self, key: Hashable, now: float, elapsed_s: list[float]) -> None:
        """The batch ``key`` came back at ``now`` (s) with these per-point times (s)."""
        self.times.extend(elapsed_s)
        if self._running.pop(key, None) is None:  # came back before it was thought started
            self._waiting = deque(w for w in self._waiting if w[0] != key)
        elif self._waiting:  # the freed thread takes the oldest queued batch
            k, size = self._waiting.popleft()
            self._running[k] = (now, size)

    def requeued(self) -> None:
        """Points of a batch came back unevaluated (cut short) and are queued again: they are
        shared out afresh, even after the last round."""
        self._last_round = False

    # -- what it asks ---------------------------------------------------------------------

    @property
    def per_point_s(self) -> float | None:
        """Median time of one point in s, or None before any is known."""
        return max(statistics.median(self.times), 1e-6) if self.times else None

    def next_sizes(self, queued: int, threads: int, now: float) -> list[int]:
        """Sizes of the batches to submit now, taking ``queued`` points left (in order).

        ``threads`` is the cluster's worker-thread count now (at least 1 is assumed). When
        nothing is in flight and ``queued > 0`` the answer is never empty.
        """
        threads = max(1, threads)
        in_flight = len(self._running) + len(self._waiting)
        sizes: list[int] = []  # what goes out now
        per = self.per_point_s
        if per is None:
            probe = min(self.probe, math.ceil(queued / threads), self.max_batch)
            # the probes first in the queue, one per thread (threads that join before a time
            # is known get one each), then at the start the follow-ups, split evenly
            for _ in range(threads - in_flight):
                if queued > 0:
                    sizes.append(min(probe, queued))
                    queued -= sizes[-1]
            if in_flight == 0:
                cap = min(self.follow_up, self.max_batch)
                base, extra = divmod(min(queued, threads * cap), threads)
                sizes += [base + (i < extra) for i in range(threads) if base + (i < extra)]
            return sizes
        size = max(1, min(self.max_batch, round(self.target_batch_s / per)))
        floor = max(1, min(size, round(self.min_batch_s / per)))
        limit = threads * self.in_flight_per_worker
        while queued > threads * floor and in_flight < limit:
            k = min(size, max(floor, math.ceil(queued / limit)), queued)
            sizes.append(k)
            queued -= k
            in_flight += 1
        if 0 < queued <= threads * floor and (not self._last_round or in_flight == 0):
            # the last round (or, after it, what a thread too busy for its share left)
            free = self._free_times(threads, now, per, sizes)
            shares = sorted((min(size, s) for s in water_fill(free, queued, per) if s),
                            reverse=True)  # the largest to the thread free first
            sizes += shares
            self._last_round = True
        return sizes

    def _free_times(self, threads: int, now: float, per: float, then: list[int]) -> list[float]:
        """Predicted free time (s) of each thread after what is running, queued and ``then``."""
        free = [max(now, start + size * per) for start, size in self._running.values()]
        free += [now] * max(0, threads - len(free))
        heapq.heapify(free)
        for size in [s for _, s in self._waiting] + then:
            heapq.heappush(free, heapq.heappop(free) + size * per)
        return sorted(free)[:threads]
