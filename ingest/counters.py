"""Cumulative energy counters (``e_ac_total_kwh``) to interval energy (``e_ac_kwh``).

Rule (docs/config.md "Ingest rules"): a counter reading belongs to the end of its row's interval, so
the energy of a row's interval is its reading minus the reading of the row before, when that
row is the immediately preceding interval (``ts_s`` of this row == ``ts_s + interval`` of the
previous one). Across a gap in the data no energy is assigned (it cannot be split between
the missing intervals); the notes count the gaps. A decrease is

* a **rollover** when ``counter_rollover_kwh`` is set and ``reading + rollover − previous`` is a
  plausible interval energy (0 … 1.5 × AC rating × interval): that energy is assigned;
* otherwise a **reset** (counter replaced or zeroed): no energy is assigned to that interval,
  and the reset is reported with its time and the two readings.

An increase above 1.5 × AC rating × interval is a **jump** (e.g. a counter preset), reported and
not assigned.

**Resolution** is measured, not assumed (:func:`counter_resolution`): the smallest positive step
between consecutive readings, accepted when nearly every step is a whole multiple of it. A
counter is **coarse** (:func:`is_coarse`) when that step exceeds :data:`COARSE_FRACTION` of the
energy the inverter can deliver in one interval at its AC rating: single-interval energies are
then quantised too crudely for interval filters (a 1 kWh counter on a 3 kW inverter logging
every 5 min advances 0 or 1 kWh per interval while the true energy is 0-0.25 kWh). Ingest then
takes interval energy from AC power when the file has it (:mod:`ingest.load`); the counter's
readings stay stored for daily and monthly totals, where they cross-check integrated power.
For a coarse counter without AC power the interval energies are its steps, and a step of one
resolution unit beyond 1.5 × rating × interval is not a jump.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ingest.units import POWER_MAX_FACTOR

#: A counter is coarse when its resolution exceeds this share of the energy the inverter can
#: deliver in one interval at its AC rating (stated rule of this software: at 10 % a single
#: interval at full load is quantised to ±10 %, at a quarter load to ±40 %).
COARSE_FRACTION = 0.1
#: Positive steps needed before a resolution is stated (fewer: not measured in this chunk).
MIN_STEPS = 8


def counter_resolution(steps_kwh: np.ndarray, *, min_steps: int = MIN_STEPS,
                       share: float = 0.95, tol: float = 0.02) -> float | None:
    """Measured resolution [kWh] of a counter from its steps between consecutive readings.

    The largest ``u`` = smallest positive step / n (n = 1 … 10) of which at least ``share``
    of the positive steps are whole multiples (within ``tol`` of a multiple); None when there are fewer than
    ``min_steps`` positive steps or the steps are not quantised (a fine counter).

    >>> counter_resolution(np.array([0, 1, 0, 0, 1, 2, 1] * 5, dtype=float))
    1.0
    >>> counter_resolution(np.linspace(0.013, 0.2, 40)) is None
    True
    """
    d = np.asarray(steps_kwh, dtype=float)
    d = d[np.isfinite(d) & (d > 1e-9)]
    if d.size < min_steps:
        return None
    smallest = float(d.min())
    for n in range(1, 11):  # the step may be a whole multiple of the resolution (0.002 of 0.001)
        u = smallest / n
        k = d / u
        if np.mean(np.abs(k - np.round(k)) <= tol) >= share:
            return float(np.round(u, 12))
    return None


def is_coarse(resolution_kwh: float | None, p_ac_max_kw: float, interval_s: float) -> bool:
    """Whether a counter of this resolution is too coarse for single-interval energy."""
    if resolution_kwh is None or not np.isfinite(interval_s) or interval_s <= 0:
        return False
    return resolution_kwh > COARSE_FRACTION * p_ac_max_kw * interval_s / 3600.0


@dataclass
class CounterEvents:
    resets: list[dict] = field(default_factory=list)
    rollovers: list[dict] = field(default_factory=list)
    jumps: list[dict] = field(default_factory=list)
    gaps: int = 0

    def as_notes(self, device: str, limit: int = 20) -> dict:
        out: dict = {}
        for name in ("resets", "rollovers", "jumps"):
            ev = getattr(self, name)
            if ev:
                out[name] = {"count": len(ev), "first": ev[:limit]}
        if self.gaps:
            out["gaps_not_assigned"] = self.gaps
        return {device: out} if out else {}


def interval_energy(ts_s: np.ndarray, interval_s: np.ndarray, counter_kwh: np.ndarray,
                    previous: tuple[int, float] | None, *, p_ac_max_kw: float,
                    rollover_kwh: float | None, events: CounterEvents, step_kwh: float = 0.0
                    ) -> tuple[np.ndarray, tuple[int, float] | None]:
    """Interval energy [kWh] for counter readings sorted by ``ts_s`` (NaN readings skipped).

    ``previous`` is ``(end_s, reading_kwh)`` of the last reading before these (from the
    previous chunk or the store), or None. ``step_kwh`` (a coarse counter's resolution) is
    added to the jump limit. Returns the energy per row (NaN where none can be
    assigned) and the new ``previous`` for the next call.

    Example: readings 100.0, 100.5, 101.5 kWh at 15-min steps give NaN, 0.5, 1.0 kWh.
    """
    n = len(ts_s)
    energy = np.full(n, np.nan)
    ok = np.flatnonzero(~np.isnan(counter_kwh) & ~np.isnan(interval_s))
    if len(ok) == 0:
        return energy, previous
    t, tau, c = ts_s[ok], interval_s[ok], counter_kwh[ok]
    end = t + tau
    prev_end = np.concatenate([[previous[0] if previous else -1], end[:-1]])
    prev_c = np.concatenate([[previous[1] if previous else np.nan], c[:-1]])
    contiguous = (prev_end == t) & ~np.isnan(prev_c)
    diff = c - prev_c
    max_kwh = POWER_MAX_FACTOR * p_ac_max_kw * tau / 3600.0 + step_kwh
    e = np.where(contiguous, diff, np.nan)
    events.gaps += int(((prev_end != t) & ~np.isnan(prev_c)).sum())
    with np.errstate(invalid="ignore"):
        neg = contiguous & (diff < 0)
        jump = contiguous & (diff > max_kwh)
    for k in np.flatnonzero(neg):
        wrapped = diff[k] + rollover_kwh if rollover_kwh else None
        info = {"ts_s": int(t[k]), "previous_kwh": float(prev_c[k]), "reading_kwh": float(c[k])}
        if wrapped is not None and 0 <= wrapped <= max_kwh[k]:
            e[k] = wrapped
            events.rollovers.append({**info, "e_ac_kwh": float(wrapped)})
        else:
            e[k] = np.nan
            events.resets.append(info)
    for k in np.flatnonzero(jump):
        e[k] = np.nan
        events.jumps.append({"ts_s": int(t[k]), "previous_kwh": float(prev_c[k]),
                             "reading_kwh": float(c[k])})
    energy[ok] = e
    return energy, (int(end[-1]), float(c[-1]))
