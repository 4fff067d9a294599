"""Which points go into each batch a study run submits, and to which worker (client side).

A batch is one dask task: it costs the client and the scheduler a round trip and the store a
transaction, about 10 ms of CPU on a 2-core machine whose cores the local workers share
(measured with ``filamant bench``). Few, large batches keep that small; but the run ends when
the last worker finishes, so the batches near the end must leave every worker thread done at
about the same time. :class:`BatchPlanner` does both, with each worker thread a *lane* whose
batches run one after another:

1. **Probe.** Until a point's time is known, one batch of at most ``probe`` points per lane:
   an unknown design may take long.
2. **Factoring.** Then each new batch takes ``1/(lanes * in_flight)`` of the points left, at
   most ``target_batch_s`` of work and at least ``min_batch_s``, so the batches shrink as the
   queue empties (Hummel, Schonberg & Flynn, "Factoring: a method for scheduling parallel
   loops", Commun. ACM 35(8), 1992). Each goes to the lane predicted to be free first.
3. **Last round.** Once what is left fits in ``min_batch_s`` per lane, it is split at once into
   one batch per lane, sized so that every lane is predicted to finish at the same moment
   (:func:`water_fill`): a lane's free time is when its running batch started (when the client
   heard of the one before it finishing) plus the work of that batch and the ones queued
   behind it, at the median time per point.

The runner submits each batch to its lane's worker as a loose restriction (another worker may
take it if that one dies). Left to itself, the scheduler places a task by the mean duration of
earlier tasks of its kind, which cannot tell a 4-point batch from a 26-point one: two large
batches ended up on one worker and the other sat idle (seen with ``filamant bench``).

The planner only counts and predicts; :func:`studies.runner.run_points` owns the futures.
"""

from __future__ import annotations

import math
import statistics
from collections import deque
from collections.abc import Hashable, Mapping
from dataclasses import dataclass, field

__all__ = ["BatchPlanner", "Lane", "water_fill"]

#: A worker thread: ``(worker address, thread index)``.
Lane = tuple[str, int]


def water_fill(free_s: list[float], points: int, per_s: float) -> list[int]:
    """Split ``points`` over lanes free at ``free_s`` so that all end together.

    Parameters
    ----------
    free_s : list of float
        When each lane is predicted to be free, in s (any common origin).
    points : int
        Points to share out.
    per_s : float
        Time of one point in s (> 0).

    Returns
    -------
    list of int
        Points per lane, in the order of ``free_s``; they sum to ``points``. A lane free later
        gets fewer (none when it is busy past the common end).
    """
    if points <= 0 or not free_s:
        return [0] * len(free_s)
    order = sorted(range(len(free_s)), key=free_s.__getitem__)
    f = [free_s[i] for i in order]
    # the common end of the k earliest lanes, (sum f[:k] + points * per) / k, while it is
    # later than the next lane's free time that lane joins in
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
class _Queued:
    key: Hashable
    size: int
    started_s: float | None = None  # when it began running (predicted), None while queued


@dataclass
class BatchPlanner:
    """Batch sizes and lanes for one run (see the module docstring for the rules).

    Parameters
    ----------
    target_batch_s : float
        Wanted work of one batch, in s.
    min_batch_s : float
        Least work of one batch but for the last round, in s.
    max_batch : int
        Most points in one batch.
    in_flight_per_worker : int
        Batches kept submitted per lane (running or queued).
    probe : int
        Points in each of the first batches, before any point's time is known.
    """

    target_batch_s: float = 1.0
    min_batch_s: float = 0.1
    max_batch: int = 64
    in_flight_per_worker: int = 2
    probe: int = 4
    times: deque[float] = field(default_factory=lambda: deque(maxlen=256))
    _lanes: dict[Lane, deque[_Queued]] = field(default_factory=dict)
    _lane_of: dict[Hashable, Lane] = field(default_factory=dict)
    _last_round: bool = False

    @staticmethod
    def lanes_of(workers: Mapping[str, int]) -> list[Lane]:
        """The lanes of workers given as ``{address: threads}``."""
        return [(addr, i) for addr, n in sorted(workers.items()) for i in range(max(0, n))]

    # -- what the runner reports ----------------------------------------------------------

    def submitted(self, key: Hashable, size: int, lane: Lane, now: float) -> None:
        """A batch of ``size`` points went out at ``now`` (s) to ``lane``."""
        q = self._lanes.setdefault(lane, deque())
        q.append(_Queued(key, size, None if q else now))
        self._lane_of[key] = lane

    def finished(self, key: Hashable, now: float, elapsed_s: list[float]) -> None:
        """The batch ``key`` came back at ``now`` (s) with these per-point times (s)."""
        self.times.extend(elapsed_s)
        lane = self._lane_of.pop(key, None)
        q = self._lanes.get(lane) if lane is not None else None
        if not q:
            return
        self._lanes[lane] = q = deque(b for b in q if b.key != key)
        if q and q[0].started_s is None:  # the lane moves on to its next batch
            q[0].started_s = now

    # -- what it asks ---------------------------------------------------------------------

    @property
    def per_point_s(self) -> float | None:
        """Median time of one point in s, or None before any is known."""
        return max(statistics.median(self.times), 1e-6) if self.times else None

    def next_batches(self, queued: int, lanes: list[Lane], now: float) -> list[tuple[int, Lane]]:
        """The batches to submit now, as ``(size, lane)``, taking ``queued`` points in order.

        ``lanes`` are the cluster's worker threads now (:meth:`lanes_of`).
        """
        if not lanes or queued <= 0:
            return []
        out: list[tuple[int, Lane]] = []
        per = self.per_point_s
        if per is None:
            for lane in lanes:
                if queued > 0 and not self._lanes.get(lane):
                    k = min(self.probe, max(1, math.ceil(queued / len(lanes))), queued)
                    out.append((k, lane))
                    queued -= k
            return out
        size = max(1, min(self.max_batch, round(self.target_batch_s / per)))
        floor = max(1, min(size, round(self.min_batch_s / per)))
        free = {lane: self._free_s(lane, now, per) for lane in lanes}
        limit = len(lanes) * self.in_flight_per_worker
        in_flight = sum(len(self._lanes.get(lane, ())) for lane in lanes)
        while queued > len(lanes) * floor and in_flight < limit:
            k = min(size, max(floor, math.ceil(queued / limit)), queued)
            lane = min(free, key=free.__getitem__)
            out.append((k, lane))
            free[lane] += k * per
            queued -= k
            in_flight += 1
        if 0 < queued <= len(lanes) * floor and (not self._last_round or in_flight == 0):
            # the last round (or what a lane too busy for its whole share left of it)
            shares = [min(size, s) for s in water_fill(list(free.values()), queued, per)]
            out += [(s, lane) for s, lane in zip(shares, free, strict=True) if s]
            self._last_round = True
        return out

    def _free_s(self, lane: Lane, now: float, per: float) -> float:
        """When ``lane`` is predicted to be free (s), after its running and queued batches."""
        q = self._lanes.get(lane)
        if not q:
            return now
        head = q[0]
        start = head.started_s if head.started_s is not None else now
        return max(now, start + head.size * per) + sum(b.size for b in list(q)[1:]) * per
