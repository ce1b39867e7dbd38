"""The flat-memory result containers: bulk put() gives exactly what add() one by one gives."""
from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st
import numpy as np

from sonar_guard.offline.results import BucketSeries, Histogram

value = st.one_of(st.floats(-5.0, 5.0), st.sampled_from([math.inf, -math.inf, math.nan, 0.0]))
# mostly ordered times with repeats and, sometimes, a step back (bag log times may repeat)
dt = st.one_of(st.floats(0.0, 0.3), st.sampled_from([0.0, 0.05, 0.1]), st.floats(-0.2, 0.0))
sample = st.tuples(dt, value, st.sampled_from([0, 0, 0, 1, 3]))


def _series_state(series: BucketSeries) -> tuple[list[float], list[float], list[int], float]:
    t, v, x = series.arrays()
    return t.tolist(), [repr(f) for f in v.tolist()], x.tolist(), series.width_s


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.lists(sample, max_size=400), st.sampled_from(['min', 'max']),
       st.integers(2, 40), st.integers(1, 97), st.booleans())
def test_bulk_put_equals_add_one_by_one(samples, keep, capacity, flush_every, in_order):
    """Every sample through add() against put() with flushes at arbitrary points; capacities
    small enough to merge buckets many times (the reference is add(), the unbatched path)."""
    one, bulk = BucketSeries(capacity, 0.05, keep), BucketSeries(capacity, 0.05, keep)
    t = 100.0
    for i, (step, v, x) in enumerate(samples):
        t += abs(step) if in_order else step
        one.add(t, v, x)
        bulk.put(t, v, x)
        if i % flush_every == 0:
            bulk.flush()
    assert _series_state(bulk) == _series_state(one)


@settings(max_examples=100, deadline=None, derandomize=True)
@given(st.lists(st.one_of(st.floats(-1.0, 3.0), st.sampled_from([math.nan, math.inf, 1.9999])),
                max_size=300))
def test_histogram_put_equals_add(values):
    one, bulk = Histogram(0.01, 2.0), Histogram(0.01, 2.0)
    for v in values:
        one.add(v)
        bulk.put(v)
    assert bulk.to_dict() == one.to_dict()
    assert bulk.count == one.count
    assert bulk.quantile(0.5) == one.quantile(0.5) or (
        math.isnan(one.quantile(0.5)) and math.isnan(bulk.quantile(0.5)))


def test_series_keeps_the_nearest_range_per_bucket_and_the_first_code():
    """A hand-made case: bucket of 0.05 s, min kept, first non-zero code kept (numpy check)."""
    s = BucketSeries(100, 0.05, 'min')
    for t, v, x in [(0.0, 2.0, 0), (0.01, 1.5, 0), (0.02, 1.7, 4), (0.06, 3.0, 0)]:
        s.put(t, v, x)
    t, v, x = s.arrays()
    np.testing.assert_array_equal(t, [0.01, 0.06])
    np.testing.assert_array_equal(v, [1.5, 3.0])
    np.testing.assert_array_equal(x, [4, 0])
