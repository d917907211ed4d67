"""How each run was carried out, in the form the compiled integrators read: its temperature history, and what
flows in and out. Nothing here knows of PyMC.

For run r:

- temperature: (time, K) points joined by straight lines and held at the last value after the last point; an
  isothermal run has one point. The run's per-run constants (ln k, ln K_c, ln K of adsorption) are stated at
  its ``nominal_kelvin`` T_n; along the way the kernel scales them by exp(-(E/R)(1/T(t) - 1/T_n)) (and k by
  (T/T_n)^n for the extended Arrhenius form), so an isothermal run costs nothing extra.
- dosing: volumetric inflow Q (volume/time) and molar inflow F_i (amount/time) constant on the intervals that
  start at ``dose_time``; the liquid volume V(t) = V0 + integral of Q (a dosed batch), or constant with an
  outflow equal to the inflow (``overflow``: a CSTR). The balances are on amounts, written for concentrations:
  dc/dt = S^T r(c, T(t)) + (F(t) - Q(t) c) / V(t).

Times are in the study's time unit, volumes in one volume unit of the user's choice (only ratios enter),
concentrations in the study's concentration unit, amounts in concentration times volume.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numba
import numpy as np


class RunConditions(NamedTuple):
    """One run's conditions (see the module's docstring): the temperature history ``knot_time``/``knot_kelvin``
    (K,), its ``nominal_kelvin``, whether the temperature changes at all (``ramped``); the dosing intervals
    ``dose_time`` (B,) with their volumetric inflow ``dose_flow`` (B,), molar inflow ``dose_inflow`` (B, N),
    the volume at the start of each interval ``dose_volume`` (B,), and ``overflow`` (volume held constant)."""

    knot_time: np.ndarray
    knot_kelvin: np.ndarray
    nominal_kelvin: float
    ramped: bool
    dose_time: np.ndarray
    dose_flow: np.ndarray
    dose_inflow: np.ndarray
    dose_volume: np.ndarray
    overflow: bool


class Conditions(NamedTuple):
    """Every run's ``RunConditions``, concatenated: run r's knots are ``knot_time[knot_offsets[r]:
    knot_offsets[r + 1]]``, its dosing intervals ``dose_time[dose_offsets[r]:dose_offsets[r + 1]]``; the scalar
    fields have one entry per run. ``run_conditions`` takes one run's view."""

    knot_offsets: np.ndarray
    knot_time: np.ndarray
    knot_kelvin: np.ndarray
    nominal_kelvin: np.ndarray
    ramped: np.ndarray
    dose_offsets: np.ndarray
    dose_time: np.ndarray
    dose_flow: np.ndarray
    dose_inflow: np.ndarray
    dose_volume: np.ndarray
    overflow: np.ndarray


@numba.njit(cache=True)
def run_conditions(conditions, r):
    """Run r's ``RunConditions`` (views, no copies)."""
    k0, k1 = conditions.knot_offsets[r], conditions.knot_offsets[r + 1]
    d0, d1 = conditions.dose_offsets[r], conditions.dose_offsets[r + 1]
    return RunConditions(
        conditions.knot_time[k0:k1],
        conditions.knot_kelvin[k0:k1],
        conditions.nominal_kelvin[r],
        conditions.ramped[r],
        conditions.dose_time[d0:d1],
        conditions.dose_flow[d0:d1],
        conditions.dose_inflow[d0:d1],
        conditions.dose_volume[d0:d1],
        conditions.overflow[r],
    )


@numba.njit(cache=True)
def temperature_at(cond, t):
    """T(t) in K: straight lines between the knots, the first value before the first, the last after the last."""
    times, kelvin = cond.knot_time, cond.knot_kelvin
    last = times.shape[0] - 1
    if t <= times[0]:
        return kelvin[0]
    if t >= times[last]:
        return kelvin[last]
    upper = np.searchsorted(times, t, side="right")
    share = (t - times[upper - 1]) / (times[upper] - times[upper - 1])
    return kelvin[upper - 1] + share * (kelvin[upper] - kelvin[upper - 1])


@numba.njit(cache=True)
def temperature_terms(cond, t):
    """(x, l) at time t: x = 1/T(t) - 1/T_n (1/K) and l = ln(T(t)/T_n); both zero for an isothermal run."""
    if not cond.ramped:
        return 0.0, 0.0
    kelvin = temperature_at(cond, t)
    return 1.0 / kelvin - 1.0 / cond.nominal_kelvin, math.log(kelvin / cond.nominal_kelvin)


@numba.njit(cache=True)
def temperature_rate(cond, t, start):
    """dx/dt = -T'(t) / T(t)^2 (1/(K time)) at time t within a step that starts at ``start``: at a point of the
    programme, T' is the slope on the step's side of it; zero for an isothermal run and outside the programme."""
    if not cond.ramped:
        return 0.0
    times, kelvin = cond.knot_time, cond.knot_kelvin
    last = times.shape[0] - 1
    if t > start:
        if t <= times[0] or t > times[last]:
            return 0.0
        upper = np.searchsorted(times, t, side="left")
    else:
        if t < times[0] or t >= times[last]:
            return 0.0
        upper = np.searchsorted(times, t, side="right")
    slope = (kelvin[upper] - kelvin[upper - 1]) / (times[upper] - times[upper - 1])
    now = temperature_at(cond, t)
    return -slope / (now * now)


@numba.njit(cache=True)
def dose_piece(cond, t):
    """The dosing interval a step starting at t lies in (the last one that starts at or before t)."""
    piece = np.searchsorted(cond.dose_time, t, side="right") - 1
    return max(piece, 0)


@numba.njit(cache=True)
def volume_at(cond, piece, t):
    """V(t) within dosing interval ``piece``."""
    if cond.overflow:
        return cond.dose_volume[piece]
    return cond.dose_volume[piece] + cond.dose_flow[piece] * (t - cond.dose_time[piece])


#: A temperature programme with at most this many points has its steps end at each point (where dT/dt jumps, an
#: error estimate straddling the kink rejects steps); a denser reactor log is smooth enough to step across.
KNOT_STOPS_MAX = 32


@numba.njit(cache=True)
def next_stop(cond, t):
    """The next time after t where a step should end: the start of the next dosing interval (the inflow jumps
    there) or, in a programme of few points, its next point; infinity when there is none."""
    stop = math.inf
    piece = dose_piece(cond, t)
    if piece + 1 < cond.dose_time.shape[0]:
        stop = cond.dose_time[piece + 1]
    knots = cond.knot_time
    if cond.ramped and knots.shape[0] <= KNOT_STOPS_MAX:
        upper = np.searchsorted(knots, t, side="right")
        if upper < knots.shape[0]:
            stop = min(stop, knots[upper])
    return stop


@dataclass(frozen=True)
class Feed:
    """Dosing into a run: volumetric ``rate`` (volume/time) from ``start`` to ``stop`` (time) of a feed whose
    concentrations are ``concentration`` (N,) in the study's unit."""

    start: float
    stop: float
    rate: float
    concentration: np.ndarray


@dataclass(frozen=True)
class RunSetup:
    """How one run was carried out, in plain Python: its temperature history ``history`` ((time, K) rows; one
    row for an isothermal run), its nominal temperature (None: the time-weighted mean over ``horizon``), its
    initial liquid ``volume``, its ``feeds``, and ``overflow`` (a CSTR: volume constant, outflow = inflow)."""

    history: np.ndarray
    horizon: float = 0.0
    nominal_kelvin: float | None = None
    volume: float = 1.0
    feeds: tuple[Feed, ...] = field(default_factory=tuple)
    overflow: bool = False

    @classmethod
    def isothermal(cls, kelvin: float, **kwargs) -> RunSetup:
        return cls(np.array([[0.0, float(kelvin)]]), nominal_kelvin=float(kelvin), **kwargs)

    @property
    def ramped(self) -> bool:
        return bool(np.ptp(self.history[:, 1]) > 0)

    @property
    def nominal(self) -> float:
        """T_n in K: as stated, else the time-weighted mean temperature over [0, horizon]."""
        if self.nominal_kelvin is not None:
            return self.nominal_kelvin
        return time_weighted_kelvin(self.history, self.horizon)

    def _intervals(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(interval starts, volumetric inflow on each, volume at each start) of this run's dosing."""
        edges = sorted({0.0, *(f.start for f in self.feeds), *(f.stop for f in self.feeds if math.isfinite(f.stop))})
        starts = np.array(edges, dtype=float)
        flow = np.zeros(starts.size)
        for feed in self.feeds:
            flow[(starts >= feed.start) & (starts < feed.stop)] += feed.rate
        volume = np.full(starts.size, float(self.volume))
        if not self.overflow:
            volume[1:] += np.cumsum(flow[:-1] * np.diff(starts))
        return starts, flow, volume

    def dosing(self, n_species: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(interval starts, volumetric inflow, molar inflow (B, N), volume at each start) of this run."""
        starts, flow, volume = self._intervals()
        inflow = np.zeros((starts.size, n_species))
        for feed in self.feeds:
            active = (starts >= feed.start) & (starts < feed.stop)
            inflow[active] += feed.rate * np.asarray(feed.concentration, dtype=float)
        return starts, flow, inflow, volume

    def volume_at(self, times: np.ndarray) -> np.ndarray:
        """V(t) at ``times``: the volume at the start of the interval each time lies in plus the inflow since
        (constant under overflow); the numpy twin of the compiled ``volume_at``."""
        starts, flow, volume = self._intervals()
        times = np.asarray(times, dtype=float)
        piece = np.maximum(np.searchsorted(starts, times, side="right") - 1, 0)
        if self.overflow:
            return volume[piece]
        return volume[piece] + flow[piece] * (times - starts[piece])


def time_weighted_kelvin(history: np.ndarray, horizon: float) -> float:
    """The mean of T(t) over [0, horizon] (K) for (time, K) points joined by straight lines and held after the
    last; the first point's temperature when ``horizon`` is 0."""
    history = np.asarray(history, dtype=float)
    if horizon <= 0 or history.shape[0] == 1:
        return float(history[0, 1])
    grid = np.unique(np.concatenate([[0.0, horizon], history[:, 0][(history[:, 0] > 0) & (history[:, 0] < horizon)]]))
    kelvin = np.interp(grid, history[:, 0], history[:, 1])
    return float(np.trapezoid(kelvin, grid) / horizon)


def build_conditions(setups: Sequence[RunSetup], n_species: int) -> Conditions:
    """The compiled form of every run's ``RunSetup``."""
    knots = [np.asarray(s.history, dtype=float) for s in setups]
    dosing = [s.dosing(n_species) for s in setups]
    return Conditions(
        np.concatenate([[0], np.cumsum([k.shape[0] for k in knots])]).astype(np.int64),
        np.ascontiguousarray(np.concatenate([k[:, 0] for k in knots])),
        np.ascontiguousarray(np.concatenate([k[:, 1] for k in knots])),
        np.array([s.nominal for s in setups], dtype=float),
        np.array([s.ramped for s in setups], dtype=np.bool_),
        np.concatenate([[0], np.cumsum([d[0].size for d in dosing])]).astype(np.int64),
        np.ascontiguousarray(np.concatenate([d[0] for d in dosing])),
        np.ascontiguousarray(np.concatenate([d[1] for d in dosing])),
        np.ascontiguousarray(np.concatenate([d[2] for d in dosing]).reshape(-1, n_species)),
        np.ascontiguousarray(np.concatenate([d[3] for d in dosing])),
        np.array([s.overflow for s in setups], dtype=np.bool_),
    )


def isothermal_conditions(kelvin: np.ndarray, n_species: int) -> Conditions:
    """Isothermal, constant-volume batch runs at ``kelvin`` (runs,)."""
    return build_conditions([RunSetup.isothermal(float(t)) for t in np.atleast_1d(kelvin)], n_species)
