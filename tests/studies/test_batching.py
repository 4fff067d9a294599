"""Batch planning (studies.batching): conservation and equal finish times.

The checks are against the definitions, not against numbers of ours: every planned point is
submitted exactly once, in order (conservation); water-filling leaves every lane it uses
finishing at one common time (its defining condition, within one point for whole points);
factoring hands out shrinking parts of what is left (Hummel, Schonberg & Flynn, Commun. ACM
35(8), 1992). A small discrete-event model of lanes that run their batches one after another
stands in for the cluster; the real cluster is in test_runner.py.
"""

from __future__ import annotations

import heapq
import itertools
import math

import pytest

from studies.batching import BatchPlanner, water_fill


def test_water_fill_shares_everything_and_ends_together():
    free = [0.0, 0.05, 0.02, 0.30]
    per = 0.01
    shares = water_fill(free, 17, per)
    assert sum(shares) == 17
    ends = [f + s * per for f, s in zip(free, shares, strict=True) if s]
    assert max(ends) - min(ends) <= per + 1e-12
    assert shares[3] == 0  # busy past the common end: gets nothing
    # a lane that is free earlier never gets less
    assert shares[0] >= shares[2] >= shares[1]


def test_water_fill_equal_lanes_split_evenly():
    assert sorted(water_fill([1.0, 1.0, 1.0], 10, 0.5)) == [3, 3, 4]
    assert water_fill([0.0, 0.0], 0, 0.1) == [0, 0]
    assert water_fill([], 5, 0.1) == []


def _simulate(planner: BatchPlanner, lanes: int, points: int, per_s: float, latency_s: float,
              max_s: float = math.inf):
    """Worker threads take batches from one queue in order, each as it frees (list scheduling);
    the client hears of each batch's end ``latency_s`` after it. A thread starts no point of a
    batch after ``max_s`` and hands the rest back, which goes to the front of the queue (as
    studies.runner does). Returns the submitted sizes, each thread's end, the points never
    evaluated and the longest batch run."""
    free = [0.0] * lanes  # when each thread is next free (a heap)
    last_end = [0.0] * lanes
    events: list[tuple[float, int, int, int, int]] = []
    keys = itertools.count()
    sizes: list[int] = []
    left = points
    longest = 0.0

    def dispatch(now: float) -> None:
        nonlocal left, longest
        for size in planner.next_sizes(left, lanes, now):
            key = next(keys)
            planner.submitted(key, size, now, lanes)
            t_free, lane = min((t, i) for i, t in enumerate(free))
            ran = size if size * per_s <= max_s else max(1, math.ceil(max_s / per_s - 1e-9))
            free[lane] = max(now, t_free) + ran * per_s
            longest = max(longest, ran * per_s)
            heapq.heappush(events, (free[lane] + latency_s, key, ran, size, lane))
            sizes.append(size)
            left -= size

    dispatch(0.0)
    while events:
        heard, key, ran, size, lane = heapq.heappop(events)
        last_end[lane] = max(last_end[lane], heard - latency_s)
        planner.finished(key, heard, [per_s] * ran)
        if ran < size:
            left += size - ran
            planner.requeued()
        dispatch(heard)
    return sizes, last_end, left, longest


@pytest.mark.parametrize("lanes", [1, 2, 3, 8])
@pytest.mark.parametrize("per_lane", [21.4, 64, 300])
def test_plan_covers_every_point_once_and_lanes_finish_together(lanes, per_lane):
    per, latency, points = 0.009, 0.01, round(per_lane * lanes)
    planner = BatchPlanner(target_batch_s=1.0, min_batch_s=0.1)
    sizes, ends, left, _ = _simulate(planner, lanes, points, per, latency)
    assert left == 0 and sum(sizes) == points and min(sizes) >= 1
    # equal finish: the spread is one point plus the client's late hearing of a start
    assert max(ends) - min(ends) <= per + 2 * latency + 1e-9
    # the makespan: the ideal share per lane, one probe's latency, and that spread
    assert max(ends) <= points * per / lanes + per + 3 * latency + 1e-9
    # few batches: in a short run the probes, a few factoring parts and one last round; in a
    # long one, at the ~10 ms of client CPU a batch costs (measured), under 5 % of the work
    if per_lane <= 64:
        assert len(sizes) <= 6 * lanes
    else:
        assert len(sizes) * 0.010 <= 0.05 * points * per


def test_probe_batches_until_a_time_is_known():
    planner = BatchPlanner(probe=4, follow_up=12)
    first = planner.next_sizes(100, 3, 0.0)
    assert first == [4, 4, 4, 12, 12, 12]  # a probe per thread, then a follow-up per thread
    for i, k in enumerate(first):
        planner.submitted(i, k, 0.0, 3)
    assert planner.next_sizes(52, 3, 0.0) == []  # nothing more before a timing
    assert planner.next_sizes(52, 8, 0.0) == [4, 4]  # but a probe for each thread that joins
    # too few points for follow-ups: probes only, sharing them out
    assert BatchPlanner(probe=4).next_sizes(5, 3, 0.0) == [2, 2, 1]
    assert BatchPlanner(probe=4, follow_up=12).next_sizes(10, 2, 0.0) == [4, 4, 1, 1]
    assert BatchPlanner(probe=4, follow_up=0).next_sizes(100, 2, 0.0) == [4, 4]
    assert BatchPlanner(probe=4, follow_up=12, max_batch=8).next_sizes(100, 2, 0.0) == [
        4, 4, 8, 8]


def test_follow_ups_keep_the_threads_busy_through_the_first_plan():
    # in the model, a thread is idle between batches only while the queue is empty; with a
    # follow-up behind each probe it is not empty while the client hears of the probe
    per, latency, lanes, points = 0.005, 0.012, 2, 128
    spans = {}
    for follow in (0, 12):
        planner = BatchPlanner(target_batch_s=1.0, min_batch_s=0.1, follow_up=follow)
        sizes, ends, left, _ = _simulate(planner, lanes, points, per, latency)
        assert left == 0 and sum(sizes) == points
        spans[follow] = max(ends)
    # without follow-ups each thread waits one latency for its second batch
    assert spans[0] - spans[12] >= latency - per - 1e-9


def test_factoring_sizes_stay_within_bounds():
    per = 0.001
    planner = BatchPlanner(target_batch_s=0.05, min_batch_s=0.01, max_batch=64)
    sizes, _, _, _ = _simulate(planner, 2, 2000, per, 0.002, max_s=0.1)
    assert sizes[:4] == [4, 4, 64, 64]  # probes, then follow-ups of max_batch
    body = sizes[4:-2]  # after the probes and follow-ups, before the last round
    assert max(body) <= 50  # target_batch_s / per
    assert min(body) >= 10  # min_batch_s / per
    assert body == sorted(body, reverse=True) or max(body) == 50


@pytest.mark.parametrize("lanes", [1, 2, 5])
def test_slow_designs_are_bounded_by_the_worker_cap(lanes):
    # designs of 0.4 s: the first batches, sized before any time is known, would run for
    # 25 s; the worker's cap (max_s) cuts them, and what it hands back is shared out again
    per, latency, points, max_s = 0.4, 0.01, 64 * lanes, 2.0
    planner = BatchPlanner(target_batch_s=1.0, min_batch_s=0.1)
    sizes, ends, left, longest = _simulate(planner, lanes, points, per, latency, max_s=max_s)
    assert left == 0
    assert longest <= max_s + per + 1e-9  # no batch runs past the cap by more than a point
    assert max(ends) - min(ends) <= per + 2 * latency + 1e-9  # still ending together
    assert max(ends) <= points * per / lanes + per + 3 * latency + 1e-9


def test_unknown_and_repeated_reports_are_harmless():
    planner = BatchPlanner()
    planner.finished("never-sent", 1.0, [0.01])
    planner.submitted("k", 3, 0.0, 1)
    planner.finished("k", 0.1, [0.01] * 3)
    planner.finished("k", 0.2, [])
    assert planner.per_point_s == pytest.approx(0.01)
    assert planner.next_sizes(5, 1, 0.3) == [5]  # nothing in flight: never an empty answer
