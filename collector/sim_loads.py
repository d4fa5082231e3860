"""Loads of the simulator as piecewise-constant events, rendered exactly to any grid.

A load schedule is a set of events ``(start_s, end_s, power_W)`` (seconds since
the simulation start, DC power at the bank terminals). Rendering it to a grid
of bins gives each bin's exact mean power (from the cumulative energy, which is
piecewise linear), so the coarse simulation step and a 1 s log see the same
energy: a 20 s water-pump burst is a sharp step in a 1 s log and a partial
step in a 60 s one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from drawdown.collector.sim_scenario import Loads


@dataclass(frozen=True)
class EventSchedule:
    """Piecewise-constant power as breakpoints and cumulative energy."""

    t_s: np.ndarray       # breakpoint times [s], non-decreasing
    energy_J: np.ndarray  # cumulative energy at each breakpoint [J]

    @classmethod
    def from_events(cls, start_s: np.ndarray, end_s: np.ndarray, power_W: np.ndarray) -> EventSchedule:
        start_s = np.asarray(start_s, dtype=float)
        end_s = np.asarray(end_s, dtype=float)
        power_W = np.asarray(power_W, dtype=float)
        t = np.concatenate([start_s, end_s, [0.0]])
        dp = np.concatenate([power_W, -power_W, [0.0]])
        order = np.argsort(t, kind="stable")
        t, dp = t[order], dp[order]
        level = np.cumsum(dp)  # power after each breakpoint
        energy = np.concatenate([[0.0], np.cumsum(level[:-1] * np.diff(t))])
        return cls(t_s=t, energy_J=energy)

    def energy_at(self, t_s: np.ndarray) -> np.ndarray:
        """Cumulative energy [J] at times ``t_s`` (exact: linear between breakpoints)."""
        return np.interp(t_s, self.t_s, self.energy_J, left=0.0)

    def bin_mean_W(self, edges_s: np.ndarray) -> np.ndarray:
        """Exact mean power [W] in each bin between consecutive ``edges_s``."""
        e = self.energy_at(edges_s)
        return np.diff(e) / np.diff(edges_s)


def _wrap(h: float) -> float:
    return h % 24.0


def build_load_events(p: Loads, *, day_start_s: np.ndarray, step_t_s: np.ndarray,
                      ambient_C: np.ndarray, seed: int, days: int | None = None
                      ) -> tuple[EventSchedule, np.ndarray, dict[str, float]]:
    """Draw every load's events for the whole simulation.

    Parameters
    ----------
    p : Loads
        The scenario's load parameters.
    day_start_s : numpy.ndarray
        Local midnights [s since simulation start], one per day plus the end
        (may run further than ``days``: the weather beyond the end decides the
        last night's heater as it would in a longer run).
    step_t_s : numpy.ndarray
        Start of every internal step [s].
    ambient_C : numpy.ndarray
        Ambient temperature per step [degC].
    seed : int
        Scenario seed; every day draws from its own stream ``(seed, day, kind)``
        so a shorter run is a prefix of a longer one.

    Returns
    -------
    schedule : EventSchedule
    cabin_C : numpy.ndarray
        Cabin temperature per step [degC] (ambient + gain, or the heater set-point).
    energy_by_kind_Wh : dict
        Scheduled energy per load kind over the whole run [Wh] (before any
        low-voltage disconnect), for the truth file.
    days : int, optional
        Days to draw events for (default: all in ``day_start_s``); events end at
        the end of the last of them.
    """
    ndays = len(day_start_s) - 1 if days is None else days
    end_s = float(day_start_s[ndays])
    starts: list[np.ndarray] = []
    ends: list[np.ndarray] = []
    powers: list[np.ndarray] = []
    kinds: list[str] = []

    def add(kind: str, s: np.ndarray, e: np.ndarray, w: np.ndarray) -> None:
        s = np.clip(np.asarray(s, dtype=float), 0.0, end_s)
        e = np.clip(np.asarray(e, dtype=float), 0.0, end_s)
        keep = e > s
        starts.append(s[keep]); ends.append(e[keep]); powers.append(np.broadcast_to(w, s.shape)[keep].astype(float))
        kinds.extend([kind] * int(keep.sum()))

    # Always-on baseline: monitor, BMS quiescent draw, gas/CO alarm.
    add("baseline", np.array([0.0]), np.array([end_s]), np.array([p.baseline_W]))

    # Heater nights first: they set the cabin temperature the fridge sees.
    heater_on = np.zeros(len(step_t_s), dtype=bool)
    for d in range(ndays):
        rng = np.random.default_rng([seed, d, 1])
        t0 = float(day_start_s[d])
        # The night that starts this evening: coldest ambient until next morning.
        night = (step_t_s >= t0 + 18 * 3600) & (step_t_s < t0 + 32 * 3600)
        if not night.any() or p.heater_fan_W <= 0:
            continue
        t_min = float(ambient_C[night].min())
        if t_min >= p.heater_below_C:
            continue
        on = t0 + (p.heater_on_h + rng.normal(0, 0.4)) * 3600
        off = t0 + (24 + p.heater_off_h + rng.normal(0, 0.3)) * 3600
        fan = p.heater_fan_W * (1.0 + 0.04 * (p.heater_below_C - t_min))
        glow_start = rng.uniform(80, 110)
        # Start: glow plug + fan; run: fan (and fuel pump); shut-down purge with glow plug.
        add("heater", np.array([on]), np.array([on + glow_start]), np.array([p.heater_glow_W]))
        add("heater", np.array([on]), np.array([off]), np.array([fan]))
        add("heater", np.array([off]), np.array([off + 150.0]), np.array([p.heater_glow_W * 0.6 + fan * 0.5]))
        heater_on |= (step_t_s >= on) & (step_t_s < off)

    cabin_C = np.where(heater_on, p.heater_setpoint_C, ambient_C + p.cabin_gain_C)

    for d in range(ndays):
        t0 = float(day_start_s[d])
        t1 = float(day_start_s[d + 1])
        rng = np.random.default_rng([seed, d, 2])
        # Compressor fridge: cycles with a duty rising with the cabin temperature.
        if p.fridge_W > 0:
            period = p.fridge_period_min * 60.0
            n = int((t1 - t0) / period * 1.3) + 2
            per = np.clip(rng.normal(period, 0.12 * period, n), 0.4 * period, None)
            cstart = t0 + rng.uniform(0, period) + np.concatenate([[0.0], np.cumsum(per[:-1])])
            cstart = cstart[cstart < t1]
            per = per[: len(cstart)]
            cab = np.interp(cstart, step_t_s, cabin_C)
            duty = np.clip(p.fridge_duty_at_20C + p.fridge_duty_per_C * (cab - 20.0), 0.12, 0.95)
            power = p.fridge_W * rng.uniform(0.95, 1.05, len(cstart))
            add("fridge", cstart, cstart + duty * per, power)
            # Compressor start: a 2-3 s inrush of about three times the running current.
            add("fridge", cstart, cstart + rng.uniform(2, 3, len(cstart)), 2.0 * power)
        # Lights in the evening.
        if p.lights_W > 0:
            on = t0 + (p.lights_on_h + rng.normal(0, 0.4)) * 3600
            off = t0 + (p.lights_off_h + rng.normal(0, 0.4)) * 3600
            if off < on:
                off += 86400.0
            add("lights", np.array([on]), np.array([off]), np.array([p.lights_W * rng.uniform(0.8, 1.2)]))
            # A dim reading light for part of the evening.
            add("lights", np.array([on + 1800]), np.array([on + 1800 + rng.uniform(0.5, 2) * 3600]),
                np.array([p.lights_W * 0.3]))
        # Water pump: short, high-current bursts around morning and evening.
        if p.pump_W > 0 and p.pump_bursts_per_day > 0:
            k = rng.poisson(p.pump_bursts_per_day)
            which = rng.random(k)
            hours = np.where(which < 0.35, rng.normal(p.wake_h + 0.5, 0.7, k),
                             np.where(which < 0.75, rng.normal(19.5, 1.2, k), rng.uniform(9.0, 22.0, k)))
            s: np.ndarray | float  # (floats for the inverter and the extras below)
            dur: np.ndarray | float
            s = t0 + np.clip(hours, 0.0, 23.9) * 3600
            dur = np.clip(rng.lognormal(np.log(12.0), 0.7, k), 3.0, 90.0)
            add("pump", s, s + dur, p.pump_W * rng.uniform(0.9, 1.1, k))
        # Inverter: kettle/coffee in the morning, laptop sessions; idle draw while on.
        eta = p.inverter_efficiency
        wake = t0 + (p.wake_h + rng.normal(0, 0.4)) * 3600
        if p.kettle_W > 0 and p.kettle_min > 0:
            dur = p.kettle_min * 60 * rng.uniform(0.8, 1.25)
            k0 = wake + rng.uniform(300, 1200)
            add("inverter", np.array([k0]), np.array([k0 + dur]), np.array([p.kettle_W / eta]))
            add("inverter", np.array([wake]), np.array([wake + 3600]), np.array([p.inverter_idle_W]))
        if p.laptop_W > 0 and p.laptop_hours > 0:
            total = p.laptop_hours * rng.uniform(0.6, 1.4) * 3600
            first = rng.uniform(0.4, 0.7) * total
            for s, dur in ((t0 + rng.uniform(13.0, 15.5) * 3600, first),
                           (t0 + rng.uniform(20.0, 21.0) * 3600, total - first)):
                add("inverter", np.array([s]), np.array([s + dur]),
                    np.array([p.laptop_W * rng.uniform(0.8, 1.2) / eta + p.inverter_idle_W]))
        for ex in p.extra:
            if d < ex.from_day:
                continue
            s = t0 + (ex.start_h + rng.normal(0, 0.2)) * 3600
            add(ex.name, np.array([s]), np.array([s + ex.hours * 3600]), np.array([ex.power_W]))

    s = np.concatenate(starts)
    e = np.concatenate(ends)
    w = np.concatenate(powers)
    kind_arr = np.array(kinds)
    energy = {k: float(((e - s) * w)[kind_arr == k].sum() / 3600.0) for k in dict.fromkeys(kinds)}
    return EventSchedule.from_events(s, e, w), cabin_C, energy
