"""What an offline check of one recording produces: per-sensor summaries, series, events.

Memory stays flat however long the recording is: histograms have fixed bins and time series
are decimated into a fixed number of buckets (each keeps the extreme that matters: the lowest
limit, the highest speed, the nearest range). Only events grow with what they find.
Times are bag time in float seconds; ranges m; speeds m/s.
"""
from __future__ import annotations

from dataclasses import dataclass, field
import math
from typing import Any

import numpy as np
import numpy.typing as npt

from sonar_guard import SAFETY_CAUTION
from sonar_guard.core.config import Config
from sonar_guard.core.monitor import EVENT_KINDS, Event
from sonar_guard.core.readings import Verdict

__all__ = ['BagResult', 'BucketSeries', 'Histogram', 'SensorSummary', 'VERDICT_CODES']

_PENDING_MAX = 1024  # samples held before a bulk flush (bounded memory: ~120 B each)

VERDICT_CODES: dict[str, int] = {v.value: i for i, v in enumerate(Verdict)}
"""Small integer per verdict, for compact series (order of the Verdict enum)."""


class Histogram:
    """Fixed-bin histogram of durations (s) with quantiles read from the bins."""

    __slots__ = ('_pending', 'bin_s', 'count', 'counts', 'max_s', 'overflow', 'total_s')

    def __init__(self, bin_s: float = 0.0005, max_s: float = 2.0) -> None:
        self.bin_s = bin_s
        self.max_s = max_s
        self.counts = np.zeros(int(math.ceil(max_s / bin_s)), dtype=np.int64)
        self.overflow: list[float] = []  # values beyond max_s, kept exactly (rare by nature)
        self.count = 0
        self.total_s = 0.0
        self._pending: list[float] = []  # values put() but not yet counted

    def put(self, value_s: float) -> None:
        """Count one duration later, in bulk (cheap; for hot loops). Reading flushes."""
        pending = self._pending
        pending.append(value_s)
        if len(pending) >= _PENDING_MAX:
            self.flush()

    def flush(self) -> None:
        """Count every value put() so far."""
        if self._pending:
            values, self._pending = self._pending, []
            self.add_many(np.asarray(values, dtype=np.float64))

    def add(self, value_s: float) -> None:
        """Count one duration (non-finite and negative values are ignored)."""
        if not math.isfinite(value_s) or value_s < 0:
            return
        self.count += 1
        self.total_s += value_s
        if value_s >= self.max_s:
            if len(self.overflow) < 10000:
                self.overflow.append(value_s)
            return
        self.counts[int(value_s / self.bin_s)] += 1

    def add_many(self, values_s: npt.NDArray[np.float64]) -> None:
        """Count many durations at once."""
        v = np.asarray(values_s, dtype=np.float64)
        v = v[np.isfinite(v) & (v >= 0)]
        self.count += int(v.size)
        self.total_s += float(v.sum())
        big = v >= self.max_s
        if big.any():
            self.overflow.extend(v[big][: max(0, 10000 - len(self.overflow))].tolist())
        idx = (v[~big] / self.bin_s).astype(np.int64)
        np.add.at(self.counts, idx, 1)

    def quantile(self, q: float) -> float:
        """Return the q-quantile (0..1) to within one bin (upper bin edge), s; NaN if empty."""
        self.flush()
        if self.count == 0:
            return math.nan
        rank = q * (self.count - 1)
        cum = np.cumsum(self.counts)
        inside = int(cum[-1]) if cum.size else 0
        if rank < inside:
            i = int(np.searchsorted(cum, rank, side='right'))
            return (i + 1) * self.bin_s
        extra = sorted(self.overflow)
        k = min(len(extra) - 1, int(rank - inside)) if extra else -1
        return extra[k] if k >= 0 else self.max_s

    @property
    def worst_s(self) -> float:
        """Largest value seen (to within one bin below max_s), s; NaN if empty."""
        self.flush()
        if self.overflow:
            return max(self.overflow)
        nz = np.flatnonzero(self.counts)
        return (int(nz[-1]) + 1) * self.bin_s if nz.size else math.nan

    def to_dict(self) -> dict[str, Any]:
        """Return the non-empty bins as {'bin_s', 'edges_s', 'counts'} for plots and JSON."""
        self.flush()
        nz = np.flatnonzero(self.counts)
        return {'bin_s': self.bin_s, 'edges_s': (nz * self.bin_s).tolist(),
                'counts': self.counts[nz].tolist(), 'beyond': len(self.overflow)}


class BucketSeries:
    """A time series decimated into at most ``capacity`` buckets, keeping one extreme each.

    ``keep='min'`` keeps the lowest value of a bucket (limits, ranges), ``'max'`` the highest
    (speeds). When full, neighbouring buckets merge and the bucket width doubles.
    """

    __slots__ = ('_keep_min', '_pending', '_t', '_v', '_x', 'capacity', 'width_s', 'start_s')

    def __init__(self, capacity: int = 4000, width_s: float = 0.05, keep: str = 'min') -> None:
        if keep not in ('min', 'max'):
            raise ValueError(f"keep must be 'min' or 'max': {keep!r}")
        self.capacity = capacity
        self.width_s = width_s
        self.start_s = math.nan
        self._keep_min = keep == 'min'
        self._t: list[float] = []
        self._v: list[float] = []
        self._x: list[int] = []  # an extra small integer per point (e.g. a verdict code)
        self._pending: list[tuple[float, float, int]] = []  # put() but not yet added

    def put(self, t_s: float, value: float, extra: int = 0) -> None:
        """Add a sample later, in bulk (cheap; for hot loops); the result equals add()'s."""
        pending = self._pending
        pending.append((t_s, value, extra))
        if len(pending) >= _PENDING_MAX:
            self.flush()

    def flush(self) -> None:
        """Add every sample put() so far, exactly as add() one by one would.

        A bucket ends up holding the first sample with its extreme value (or the existing
        point when that is as good), and its extra code follows that sample and later non-zero
        codes. So only these samples go through add(): the first of each bucket, those with an
        extra code or a non-finite value, and those equal to their bucket's finite extreme.
        Merging buckets later keeps this true (a merged bucket is a union of buckets).
        """
        if not self._pending:
            return
        pending, self._pending = self._pending, []
        n = len(pending)
        t = np.fromiter((p[0] for p in pending), np.float64, n)
        ordered = (bool(np.isfinite(t).all()) and bool(np.all(t[1:] >= t[:-1]))
                   and (not self._t or t[0] >= self._t[-1]))
        if not ordered:  # out-of-order times follow add()'s own rules, sample by sample
            for ti, vi, xi in pending:
                self.add(ti, vi, xi)
            return
        v = np.fromiter((p[1] for p in pending), np.float64, n)
        x = np.fromiter((p[2] for p in pending), np.int64, n)
        start = float(t[0]) if math.isnan(self.start_s) else self.start_s
        k = np.floor((t - start) / self.width_s)
        first = np.ones(n, dtype=bool)
        first[1:] = k[1:] != k[:-1]
        starts = np.flatnonzero(first)
        finite = np.isfinite(v)
        reduce = np.fmin.reduceat if self._keep_min else np.fmax.reduceat
        extreme = reduce(np.where(finite, v, np.nan), starts)
        extreme_of = np.repeat(extreme, np.diff(np.append(starts, n)))
        keep = first | (x != 0) | ~finite | (v == extreme_of)
        for i in np.flatnonzero(keep).tolist():
            self.add(float(t[i]), float(v[i]), int(x[i]))

    def add(self, t_s: float, value: float, extra: int = 0) -> None:
        """Add a sample at time ``t_s`` (samples arrive in time order)."""
        if math.isnan(self.start_s):
            self.start_s = t_s
        k = math.floor((t_s - self.start_s) / self.width_s)
        if self._t and k <= math.floor((self._t[-1] - self.start_s) / self.width_s):
            better = value < self._v[-1] if self._keep_min else value > self._v[-1]
            if better or (math.isnan(self._v[-1]) and not math.isnan(value)):
                self._t[-1], self._v[-1], self._x[-1] = t_s, value, extra
            elif extra and not self._x[-1]:
                self._x[-1] = extra
            return
        self._t.append(t_s)
        self._v.append(value)
        self._x.append(extra)
        if len(self._t) > self.capacity:
            self._halve()

    def _halve(self) -> None:
        self.width_s *= 2
        t, v, x = self._t, self._v, self._x
        self._t, self._v, self._x = [], [], []
        for ti, vi, xi in zip(t, v, x):
            self.add(ti, vi, xi)

    def arrays(self) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64],
                              npt.NDArray[np.int64]]:
        """Return (times s, values, extras) as numpy arrays."""
        self.flush()
        return (np.asarray(self._t, dtype=np.float64), np.asarray(self._v, dtype=np.float64),
                np.asarray(self._x, dtype=np.int64))

    def __len__(self) -> int:
        self.flush()
        return len(self._t)


@dataclass
class SensorSummary:
    """What one sensor did over a recording."""

    name: str
    topic: str
    readings: int = 0
    counts: dict[str, int] = field(default_factory=lambda: {v.value: 0 for v in Verdict})
    range_min_m: float = math.inf  # over finite, non-negative readings
    range_max_m: float = -math.inf
    periods: Histogram = field(default_factory=Histogram)
    latencies: Histogram = field(default_factory=Histogram)  # worst-case detection latency
    ranges: BucketSeries = field(default_factory=lambda: BucketSeries(keep='min'))

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of this summary."""
        n = max(self.readings, 1)
        return {
            'name': self.name, 'topic': self.topic, 'readings': self.readings,
            'counts': dict(self.counts),
            'shares': {k: c / n for k, c in self.counts.items()},
            'range_min_m': _finite_or_none(self.range_min_m),
            'range_max_m': _finite_or_none(self.range_max_m),
            'period_p50_s': _finite_or_none(self.periods.quantile(0.5)),
            'period_p99_s': _finite_or_none(self.periods.quantile(0.99)),
            'period_worst_s': _finite_or_none(self.periods.worst_s),
            'latency_p50_s': _finite_or_none(self.latencies.quantile(0.5)),
            'latency_p99_s': _finite_or_none(self.latencies.quantile(0.99)),
        }


def _finite_or_none(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


@dataclass
class BagResult:
    """The outcome of checking one recording."""

    path: str
    config: Config
    config_source: str
    sensors: list[SensorSummary] = field(default_factory=list)
    events: list[Event] = field(default_factory=list)
    limit: BucketSeries = field(default_factory=lambda: BucketSeries(keep='min'))
    speed: BucketSeries = field(default_factory=lambda: BucketSeries(keep='max'))
    t_start: float = math.nan
    t_end: float = math.nan
    messages: int = 0
    error: str | None = None  # why the recording could not be read to its end
    notes: list[str] = field(default_factory=list)
    # event kinds not checked because what they need is unknown (no parameter file), and one
    # sentence saying so and which file would enable them ('' when every check ran)
    skipped_checks: tuple[str, ...] = ()
    skipped_notice: str = ''

    @property
    def duration_s(self) -> float:
        """Bag time covered, s (0 for an empty recording)."""
        return 0.0 if math.isnan(self.t_start) else self.t_end - self.t_start

    def findings(self, kinds: frozenset[str] | None = None) -> list[Event]:
        """Return the events of the given kinds (all kinds when None)."""
        return [e for e in self.events if kinds is None or e.kind in kinds]

    def summary(self) -> dict[str, Any]:
        """Return the JSON summary of this recording."""
        by_kind = {k: 0 for k in EVENT_KINDS}
        for e in self.events:
            by_kind[e.kind] = by_kind.get(e.kind, 0) + 1
        _, limits, _ = self.limit.arrays()
        return {
            'path': self.path, 'config': self.config_source, 'messages': self.messages,
            't_start': _finite_or_none(self.t_start), 't_end': _finite_or_none(self.t_end),
            'duration_s': self.duration_s, 'readings': sum(s.readings for s in self.sensors),
            'events': len(self.events), 'events_by_kind': by_kind,
            'min_limit_mps': _finite_or_none(float(limits.min())) if limits.size else None,
            'complete': self.error is None, 'error': self.error, 'notes': list(self.notes),
            'skipped_checks': list(self.skipped_checks), 'caution': SAFETY_CAUTION,
        }

    def to_dict(self) -> dict[str, Any]:
        """Return the contract JSON of one recording: summary, sensors, events."""
        return {'summary': self.summary(),
                'sensors': [s.to_dict() for s in self.sensors],
                'events': [e.to_dict() for e in self.events]}
