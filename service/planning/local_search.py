"""Local search over whole site patterns after the candidate search: fewer, fuller trips.

The candidates of ``joint.py`` come from policy classes; their trips are then what the staggering gives,
often a few nearly empty ones. This step works on the plan itself, on a fixed repeat ``R`` (calendar
days; whole weeks unless all seven days work). A site's *option* is a pattern of period ``P`` (a
divisor of ``R`` of the form ``R / 2^k``, whole weeks on a weekly calendar) with ``c`` deliveries on
working days spread as evenly as the working days allow: on the ``N`` working days of ``[0, P)``,
indices ``(r + ⌊j N / c⌋) mod N``, ``j < c``, for every rotation ``r < N`` (Bresenham spreads; a
shifted spread ``⌊(j N + s) / c⌋`` is the same cyclic word of gaps started elsewhere, so the rotations
cover it; Monday, Wednesday, Friday is one of them), kept when every cyclic calendar gap is
at most ``⌊U_i⌋``. Rule 2 then holds by construction (each delivery carries ``d_i ×`` its gap), the
dates are distinct (one stop per site per date) and on working weekdays.

Each date ``t`` of the repeat needs at least ``L(t) = max(⌈load_t / W⌉, ⌈count_t / S⌉, big_t, [count_t > 0])``
trips (``rebalance.py``; ``big_t`` the deliveries above ``W / 2``, no two of which share a trip); the
search minimises

    K Σ_t L(t) / R + Σ_i own_i − ε (K / R) Σ_t ((load_t / W)² + (count_t / S)²) + BIG · Σ_t max(0, L(t) − τ)

one site at a time (``own_i = (k_i c + H_i Σ g²) / P`` its stop and holding cost per day): take the
site out, score every option at once (each (date, gap) cell scored once on the repeat and folded onto
the option's period), and propose the best. An option may cost the site more than its pattern when it
saves a trip; the small concentration term (ε) prefers fuller dates, so that nearly empty trips drain
over several moves. ``L(t)`` is only a lower bound on a date's trips (0.65, 0.49, 0.42, 0.23, 0.18 of
``W`` load 1.96 ``W`` and need three), so a proposed move is made only when, with the touched dates packed
as the cost packs them (``packing.pack_date``), the cost does not rise and the trips do not grow
(:class:`_Packed`). After a search, the dates whose packing needs more trips than ``L(t)`` get a lower
capacity in the count (at most ``ADAPT_SHRINK`` of it and below ``load / (trips − 1)``) and the search runs
again (``ADAPT_ROUNDS``; on the chosen plan also before the first search), so the score learns where the
packing adds a trip. Starts: the chosen plan (when its periods divide ``R``) and a greedy insertion
(largest deliveries first) on a few short repeats; the ``KEEP`` cheapest (dates packed) are returned.
The planner keeps the result only when its exact cost (every date packed, ``evaluation.py``) is lower
and every date fits ``trips_per_day``; the step is anytime (checks the deadline between sites).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from service.planning.inputs import Problem
from service.planning.packing import LOAD_TOLERANCE, pack, pack_date
from service.planning.patterns import Patterns
from service.planning.workweek import WorkWeek

#: Weight of the concentration term (in trips: a date filled to ``W`` and ``S`` scores ``2 ε``).
CONCENTRATION = 0.05
#: Passes over the sites per start at most.
PASSES = 6
#: Options per site and start at most (the cheapest for the site first).
MAX_OPTIONS = 4000
#: Rounds of :func:`_adapt` (dates' capacities lowered where the packing needs more trips) per start.
ADAPT_ROUNDS = 3
ADAPT_SHRINK = 0.97
#: Plans returned (the cheapest starts with their dates packed), each then evaluated exactly by the planner.
KEEP = 2


@dataclass
class _Options:
    """Flat options of one site: per option its period, own cost, and its (day, gap) entries within one
    period; an entry's cell ``base[P] + day · G + gap`` indexes the (date, gap) grid folded onto ``P``."""

    R: int
    period: np.ndarray
    own: np.ndarray
    day: np.ndarray
    gap: np.ndarray
    owner: np.ndarray  # option of each entry
    first: np.ndarray  # entries of option ``j``: ``first[j] : first[j] + count[j]``
    count: np.ndarray
    cell: np.ndarray
    G: int  # longest gap + 1
    periods: list  # the periods, in the order of their grids
    blocks: list  # (own, P, days, gaps) with ``days``, ``gaps`` of shape (options, c)
    where: np.ndarray  # (block, row) of each option

    def dates(self, j: int, demand: float) -> tuple[np.ndarray, np.ndarray]:
        """Dates over ``R`` and quantities of option ``j``."""
        sl = slice(self.first[j], self.first[j] + self.count[j])
        P = int(self.period[j])
        reps = self.R // P
        d = (self.day[sl][None, :] + P * np.arange(reps)[:, None]).ravel()
        return d, np.tile(demand * self.gap[sl], reps)

    def longest(self, j: int) -> float:
        return float(self.gap[self.first[j] : self.first[j] + self.count[j]].max())

    def base(self, j: int) -> tuple[int, np.ndarray, np.ndarray]:
        """Period, days within it and gaps of option ``j``."""
        b, row = self.where[j]
        _, P, days, gaps = self.blocks[b]
        return P, days[row], gaps[row]


class _Spreads:
    """Even spreads of ``c`` deliveries over the working days of a period ``P`` (cached per ``(P, c)``)."""

    def __init__(self, week: WorkWeek):
        self.week = week
        self.cache: dict[tuple[int, int], tuple[np.ndarray, np.ndarray]] = {}
        self.count: dict[int, int] = {}

    def working(self, P: int) -> int:
        """Working days in ``[0, P)``."""
        if P not in self.count:
            self.count[P] = int(self.week.is_working(np.arange(P)).sum())
        return self.count[P]

    def get(self, P: int, c: int) -> tuple[np.ndarray, np.ndarray]:
        key = (P, c)
        if key not in self.cache:
            days = np.arange(P)
            wd = days[self.week.is_working(days)]
            N = len(wd)
            idx = (np.arange(N)[:, None] + (np.arange(c)[None, :] * N) // c) % N
            idx = np.unique(np.sort(idx, axis=1), axis=0)
            cal = wd[idx]
            nxt = np.concatenate([cal[:, 1:], cal[:, :1] + P], axis=1)
            self.cache[key] = (cal, nxt - cal)
        return self.cache[key]


def _periods(R: int, week: WorkWeek) -> list[int]:
    out = []
    P = R
    while P >= 1 and R % P == 0 and (week.n == 7 or P % 7 == 0):
        out.append(P)
        if P % 2:
            break
        P //= 2
    return out


def _options(problem: Problem, week: WorkWeek, spreads: _Spreads, R: int, i: int, cache: dict) -> _Options | None:
    """The options of site ``i`` whose own cost is within ``K c / P`` of the cheapest (``c / P`` the
    deliveries per day of the cheapest; no move can save more trips per day than the site's deliveries).
    ``cache`` keeps each site's spreads that fit its tank, per ``(i, P, c)``, and its options per
    ``(i, R)``, across starts."""
    if (i, R) not in cache:
        cache[i, R] = _fresh_options(problem, week, spreads, R, i, cache)
    return cache[i, R]


def _fresh_options(problem: Problem, week: WorkWeek, spreads: _Spreads, R: int, i: int, cache: dict):
    k, H, u = float(problem.stop_cost[i]), float(problem.H[i]), int(problem.whole_days[i])
    found = []  # (P, c, lower bound on the own cost)
    for P in _periods(R, week):
        N = spreads.working(P)
        for c in range(max(1, math.ceil(P / u)), N + 1):
            found.append((P, c, (k * c + H * P * P / c) / P))  # Σ g² ≥ P² / c
    if not found:
        return None
    cheapest = min(found, key=lambda f: f[2])
    floor = cheapest[2]
    window = problem.dispatch_cost * cheapest[1] / cheapest[0] * 1.5
    blocks = []
    for P, c, low in found:
        if low > floor + window:
            continue
        key = (i, P, c)
        if key not in cache:
            cal, gaps = spreads.get(P, c)
            ok = gaps.max(axis=1) <= u
            cache[key] = None
            if ok.any():
                cal, gaps = cal[ok], gaps[ok]
                cache[key] = ((k * c + H * (gaps.astype(float) ** 2).sum(axis=1)) / P, P, cal, gaps)
        if cache[key] is not None:
            blocks.append(cache[key])
    if not blocks:
        return None
    every = np.concatenate([b[0] for b in blocks])
    last = min(MAX_OPTIONS, len(every)) - 1
    limit = min(float(every.min()) + window, float(np.partition(every, last)[last]))
    kept = []
    for own, P, cal, gaps in blocks:
        ok = own <= limit
        if ok.all():
            kept.append((own, P, cal, gaps))
        elif ok.any():
            kept.append((own[ok], P, cal[ok], gaps[ok]))
    return _pack_blocks(kept, R)


def _pack_blocks(blocks, R: int) -> _Options:
    G = max(int(b[3].max()) for b in blocks) + 1
    periods = sorted({b[1] for b in blocks}, reverse=True)
    base = dict(zip(periods, np.cumsum([0] + [P * G for P in periods[:-1]]).tolist(), strict=True))
    days, gaps, counts, periods_of, owns, where = [], [], [], [], [], []
    for b, (own, P, d, g) in enumerate(blocks):
        m, c = d.shape
        days.append(d.ravel())
        gaps.append(g.ravel())
        counts.append(np.full(m, c))
        periods_of.append(np.full(m, P))
        owns.append(own)
        where.append(np.stack([np.full(m, b), np.arange(m)], axis=1))
    own = np.concatenate(owns).astype(float)
    order = np.argsort(own, kind="stable")  # option 0 is the cheapest for the site; ties go to it
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    count = np.concatenate(counts)
    first = np.concatenate([[0], np.cumsum(count)[:-1]])
    period = np.concatenate(periods_of).astype(np.int64)
    day, gap = np.concatenate(days).astype(np.int64), np.concatenate(gaps).astype(np.int64)
    owner = np.repeat(np.arange(len(own)), count)
    offset = np.array([base[P] for P in period.tolist()], dtype=np.int64)
    return _Options(
        R=R,
        period=period[order],
        own=own[order],
        day=day,
        gap=gap.astype(float),
        owner=rank[owner],
        first=first[order],
        count=count[order],
        cell=offset[owner] + day * G + gap,
        G=G,
        periods=periods,
        blocks=blocks,
        where=np.concatenate(where)[order],
    )


class _State:
    """Per-date loads and counts over the repeat, and the scoring of :func:`improve_local`."""

    def __init__(self, problem: Problem, R: int):
        self.R = R
        self.limit = problem.capacity * (1 + LOAD_TOLERANCE)
        self.stops = math.inf if problem.max_stops is None else float(problem.max_stops)
        self.tau = math.inf if problem.trips_per_day is None else problem.trips_per_day
        self.big = float(problem.n + 1)
        self.K = problem.dispatch_cost
        self.load = np.zeros(R)
        self.count = np.zeros(R)
        self.large = np.zeros(R)  # deliveries above W / 2: no two share a trip
        self.half = self.limit / 2
        self.wload = np.full(R, 1.0 / self.limit if math.isfinite(self.limit) else 0.0)  # 1 / (W of each date)
        self.wcount = 1.0 / self.stops if math.isfinite(self.stops) else 0.0

    def score(self, date, load, count, big):
        wload = self.wload[date]
        by_load = np.ceil(load * wload * (1 - 1e-12))
        L = np.maximum(np.maximum(by_load, np.ceil(count * self.wcount * (1 - 1e-12))), np.maximum(big, count > 0))
        over = np.maximum(L - self.tau, 0.0) if math.isfinite(self.tau) else 0.0
        fill = (load * wload) ** 2 + (count * self.wcount) ** 2
        return self.K / self.R * (L - CONCENTRATION * fill + self.big * over)

    def delta(self, date, q):
        load, count, big = self.load[date], self.count[date], self.large[date]
        return self.score(date, load + q, count + 1, big + (q > self.half)) - self.score(date, load, count, big)

    def add(self, date, q, sign):
        self.load[date] += sign * q
        self.count[date] += sign
        self.large[date] += sign * (q > self.half)


def _best(state: _State, opts: _Options, demand: float) -> int:
    """The option of least score: each (date, gap) cell's change scored once, then summed per option."""
    R, G = state.R, opts.G
    grid = state.delta(np.repeat(np.arange(R), G), demand * np.tile(np.arange(G, dtype=float), R)).reshape(R, G)
    folded = np.concatenate([grid.reshape(R // P, P, G).sum(axis=0).ravel() for P in opts.periods])
    total = np.bincount(opts.owner, weights=folded[opts.cell], minlength=len(opts.own)) + opts.own
    return int(np.argmin(total))


class _Packed:
    """Each date's deliveries (site → quantity) and its trips as the cost packs them (``pack_date``), so a
    move is checked on the trips it really adds or saves (memoised per set of quantities)."""

    def __init__(self, problem: Problem, state: _State, options: list[_Options], chosen: list[int]):
        self.problem, self.tau, self.K, self.R = problem, state.tau, state.K, state.R
        self.items: list[dict[int, float]] = [{} for _ in range(state.R)]
        for i, (o, c) in enumerate(zip(options, chosen, strict=True)):
            dates, q = o.dates(c, float(problem.demand[i]))
            for t, x in zip(dates.tolist(), q.tolist(), strict=True):
                self.items[t][i] = x
        self.memo: dict[tuple, int] = {}
        self.trips = [self.count(list(m.values())) for m in self.items]

    def count(self, q: list[float]) -> int:
        if not q:
            return 0
        key = tuple(sorted(q))
        if key not in self.memo:
            self.memo[key] = len(pack_date(np.array(q), self.problem.capacity, self.problem.max_stops))
        return self.memo[key]

    def delta(self, i: int, old: np.ndarray, new: np.ndarray, new_q: np.ndarray) -> tuple[float, dict[int, int]]:
        """Change of the trips' cost per day (with the charge for trips above ``trips_per_day``) when site
        ``i`` moves from dates ``old`` to ``new``, and the new trips of the touched dates."""
        put = dict(zip(new.tolist(), new_q.tolist(), strict=True))
        change, after = 0.0, {}
        for t in set(old.tolist()) | put.keys():
            q = [x for s, x in self.items[t].items() if s != i]
            if t in put:
                q.append(put[t])
            n = self.count(q)
            after[t] = n
            was = self.trips[t]
            change += n - was
            if math.isfinite(self.tau):
                change += (self.problem.n + 1) * (max(n - self.tau, 0) - max(was - self.tau, 0))
        return self.K * change / self.R, after

    def cost(self, options: list[_Options], chosen: list[int]) -> float:
        if math.isfinite(self.tau) and max(self.trips) > self.tau:
            return math.inf
        own = sum(float(o.own[c]) for o, c in zip(options, chosen, strict=True))
        return self.K * sum(self.trips) / self.R + own

    def move(self, i: int, old: np.ndarray, new: np.ndarray, new_q: np.ndarray, after: dict[int, int]) -> None:
        for t in old.tolist():
            del self.items[t][i]
        for t, x in zip(new.tolist(), new_q.tolist(), strict=True):
            self.items[t][i] = x
        for t, n in after.items():
            self.trips[t] = n


def _search(problem, state: _State, options: list[_Options], chosen: list[int], deadline) -> float:
    """Site-by-site moves until a pass changes nothing (or ``PASSES``, or the deadline); False when cut.
    A move proposed by the score is made when it lowers the cost with the dates packed (:class:`_Packed`),
    or keeps it and improves the score. Returns the plan's cost with its dates packed (``inf`` when a date
    needs more than ``trips_per_day`` trips)."""
    d = problem.demand
    packed = _Packed(problem, state, options, chosen)
    order = np.argsort(-np.array([o.own[c] for o, c in zip(options, chosen, strict=True)]), kind="stable").tolist()
    for _ in range(PASSES):
        changed = False
        for i in order:
            if deadline is not None and time.monotonic() > deadline:
                return packed.cost(options, chosen)
            o, c = options[i], chosen[i]
            dates, q = o.dates(c, float(d[i]))
            state.add(dates, q, -1)
            j = _best(state, o, float(d[i]))
            if j != c:
                new_dates, new_q = o.dates(j, float(d[i]))
                cur = float(state.delta(dates, q).sum() + o.own[c])
                new = float(state.delta(new_dates, new_q).sum() + o.own[j])
                if new < cur - 1e-12:
                    trips, after = packed.delta(i, dates, new_dates, new_q)
                    exact = trips + float(o.own[j] - o.own[c])
                    if exact < -1e-12 or (exact <= 1e-12 and trips <= 0):
                        packed.move(i, dates, new_dates, new_q, after)
                        chosen[i] = j
                        changed = True
                        dates, q = new_dates, new_q
            state.add(dates, q, +1)
        if not changed:
            break
    return packed.cost(options, chosen)


def _adapt(problem: Problem, state: _State, options: list[_Options], chosen: list[int]) -> bool:
    """Pack every date of the plan (``packing.pack``, the rule the cost uses); where it needs more trips
    than the search's count, lower that date's capacity in the count (to at most ``ADAPT_SHRINK`` of it and
    below ``load / (trips − 1)``), so the next search sees the trip the packing adds. False when none did."""
    d = problem.demand
    days, sites, quantities = [], [], []
    for i, (o, c) in enumerate(zip(options, chosen, strict=True)):
        dates, q = o.dates(c, float(d[i]))
        days.append(dates)
        sites.append(np.full(len(dates), i))
        quantities.append(q)
    day, site, quantity = np.concatenate(days), np.concatenate(sites), np.concatenate(quantities)
    order = np.lexsort((site, day))
    _, dates, trips = pack(day[order], site[order], quantity[order], problem.capacity, problem.max_stops)
    counted = np.ceil(state.load[dates] * state.wload[dates] * (1 - 1e-12))
    counted = np.maximum(counted, np.maximum(np.ceil(state.count[dates] * state.wcount * (1 - 1e-12)), state.large[dates]))
    short = trips > np.maximum(counted, 1)
    if not short.any():
        return False
    t, n = dates[short], trips[short]
    limit = np.minimum(ADAPT_SHRINK / state.wload[t], state.load[t] / (n - 1) * (1 - 1e-6))
    state.wload[t] = 1.0 / limit
    return True


def _patterns(problem: Problem, options: list[_Options], chosen: list[int]) -> Patterns:
    period = np.array([o.period[c] for o, c in zip(options, chosen, strict=True)], dtype=np.int64)
    sites, offsets, gaps = [], [], []
    for i, (o, c) in enumerate(zip(options, chosen, strict=True)):
        _, days, g = o.base(c)
        sites.append(np.full(len(days), i))
        offsets.append(days)
        gaps.append(g)
    site, offset, gap = np.concatenate(sites), np.concatenate(offsets), np.concatenate(gaps)
    order = np.lexsort((offset, site))
    return Patterns(period, site[order], offset[order].astype(np.int64), gap[order].astype(np.int64))


def _with_current(opts: _Options, P: int, days: np.ndarray, gaps: np.ndarray, own: float, R: int) -> tuple[_Options, int]:
    """``opts`` with the site's current pattern added as an option (its index returned)."""
    for b, (_, p, b_days, _) in enumerate(opts.blocks):
        if p == P and b_days.shape[1] == len(days):
            same = np.flatnonzero((b_days == days[None, :]).all(axis=1))
            if len(same):
                return opts, int(np.flatnonzero((opts.where[:, 0] == b) & (opts.where[:, 1] == same[0]))[0])
    block = (np.array([own]), P, np.asarray(days)[None, :], np.asarray(gaps)[None, :])
    opts = _pack_blocks([*opts.blocks, block], R)
    return opts, int(np.flatnonzero(opts.where[:, 0] == len(opts.blocks) - 1)[0])


def improve_local(
    problem: Problem, week: WorkWeek, start: Patterns | None, start_repeat: int, repeats: list[int], deadline: float | None
) -> list[Patterns]:
    """Improved plans (module docstring): one per start that completed, best first is not guaranteed."""
    d = problem.demand
    out: list[tuple[float, Patterns]] = []
    spreads = _Spreads(week)
    cache: dict = {}
    for R, from_start in ([(start_repeat, True)] if start is not None else []) + [(R, False) for R in repeats]:
        if deadline is not None and time.monotonic() > deadline:
            break
        if from_start:
            assert start is not None
            if (R % start.period).any():
                continue
        state = _State(problem, R)
        options: list[_Options] = []
        chosen: list[int] = []
        own_stop, own_hold = (None, None) if start is None else start.site_costs(problem.stop_cost, problem.H)
        failed = False
        for i in range(problem.n):
            o = _options(problem, week, spreads, R, i, cache)
            if from_start:
                assert start is not None and own_stop is not None and own_hold is not None
                mine = start.site == i
                P = int(start.period[i])
                if o is None:
                    mine_own = np.array([own_stop[i] + own_hold[i]])
                    o = _pack_blocks([(mine_own, P, start.offset[mine][None, :], start.gap[mine][None, :])], R)
                    c = 0
                else:
                    o, c = _with_current(o, P, start.offset[mine], start.gap[mine], float(own_stop[i] + own_hold[i]), R)
            elif o is None:
                failed = True
                break
            else:
                c = -1
            options.append(o)
            chosen.append(c)
        if failed:
            continue
        if not from_start:  # greedy insertion, largest deliveries first
            size = np.array([d[i] * o.longest(0) for i, o in enumerate(options)])
            for i in np.argsort(-size, kind="stable").tolist():
                if deadline is not None and time.monotonic() > deadline:
                    failed = True
                    break
                o = options[i]
                j = _best(state, o, float(d[i]))
                chosen[i] = j
                dates, q = o.dates(j, float(d[i]))
                state.add(dates, q, +1)
            if failed:
                break
        else:
            for i, (o, c) in enumerate(zip(options, chosen, strict=True)):
                dates, q = o.dates(c, float(d[i]))
                state.add(dates, q, +1)
            _adapt(problem, state, options, chosen)  # the start's own packing, before it is moved
        cost = _search(problem, state, options, chosen, deadline)
        kept = (cost, _patterns(problem, options, chosen))
        for _ in range(ADAPT_ROUNDS):
            if (deadline is not None and time.monotonic() > deadline) or not _adapt(problem, state, options, chosen):
                break
            cost = _search(problem, state, options, chosen, deadline)
            if cost < kept[0]:
                kept = (cost, _patterns(problem, options, chosen))
        out.append(kept)
    out.sort(key=lambda k: k[0])
    return [p for _, p in out[:KEEP]]
