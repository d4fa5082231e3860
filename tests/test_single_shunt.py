"""Single-shunt ledger: load steps under charging, a bank held by a charger, simulator truth.

With one shunt only the net current is logged (Kirchhoff's current law at the bank:
net = sources - loads). Loads superpose and switch in steps while solar changes
smoothly, so the hidden load is rebuilt from paired falls and rises of the net current;
the expected values below are closed-form sums of the synthetic loads put in.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from drawdown.analysis.ledger import daily_ledger
from drawdown.analysis.single_shunt import _load_step_events
from drawdown.analysis.system import system_from_mapping
from tests.test_ledger import long_frame


def _lfp_system(solar: bool = False):
    d = {"site": {"latitude_deg": 60.4, "longitude_deg": 5.3, "timezone": "Europe/Oslo"},
         "battery": {"chemistry": "lifepo4", "nominal_voltage_V": 12.8, "rated_capacity_Ah": 200}}
    if solar:
        d["solar"] = [{"peak_power_W": 300}]
    return system_from_mapping(d)


def _ramp_solar(n: int) -> np.ndarray:
    # A smooth solar current [A]: a half sine over the window, changing by at most
    # 10*pi/n A per bin (0.05 A for n = 600); a step's size carries that bin's change.
    return 10.0 * np.sin(np.linspace(0.0, np.pi, n))


def _events_under_ramp(load: np.ndarray) -> np.ndarray:
    """The step events rebuilt from net = a smooth solar ramp - ``load`` (Kirchhoff at the bank)."""
    n = len(load)
    return _load_step_events(_ramp_solar(n) - load, step_min_A=0.6, amp_max_A=50.0, max_bins=n)[0]


def test_paired_load_steps_under_a_smooth_solar_ramp_give_each_load_its_draw():
    # Kirchhoff's current law: net = solar - (fridge + lights); loads superpose.
    n = 600
    load = np.zeros(n)
    load[100:115] += 4.0          # a fridge cycle, 15 bins
    load[200:480] += 1.8          # a long load (satellite terminal), 280 bins
    load[300:318] += 4.0          # a fridge cycle nested in it
    np.testing.assert_allclose(_events_under_ramp(load), load, atol=0.05)


def test_unpaired_charger_steps_are_not_loads():
    # An alternator switching on (+25 A) and never off within the window is not a load;
    # the fridge cycle during it still is.
    n = 400
    alt = np.where(np.arange(n) >= 50, 25.0, 0.0)
    load = np.zeros(n)
    load[200:214] = 3.5
    events, _, _ = _load_step_events(_ramp_solar(n) + alt - load, step_min_A=0.6, amp_max_A=50.0,
                                     max_bins=400)
    np.testing.assert_allclose(events, load, atol=0.05)


def test_two_loads_switching_off_in_the_same_bin_are_both_closed():
    n = 600
    load = np.zeros(n)
    load[250:350] += 2.0
    load[300:350] += 3.0
    np.testing.assert_allclose(_events_under_ramp(load), load, atol=0.05)


def test_a_short_burst_that_starts_with_a_longer_load_closes_only_its_own_part():
    # A fridge (2.5 A, 40 bins) and a water-pump burst (3.5 A, 2 bins) switch on in the
    # same bin: one 6 A fall, a 3.5 A rise two bins later, a 2.5 A rise at the fridge's
    # end. A long load (1.8 A) running across them must stay open.
    n = 600
    load = np.zeros(n)
    load[100:500] += 1.8
    load[200:240] += 2.5
    load[200:202] += 3.5
    # The ramp's change per bin (<= 0.05 A) enters both the burst's rise and the fridge's rest.
    np.testing.assert_allclose(_events_under_ramp(load), load, atol=0.1)


def test_a_pair_whose_load_the_sun_could_not_have_carried_is_not_a_load():
    # Kirchhoff at the bank: with only the sun charging, load = solar - net <= solar_max - net.
    # A 3 A fall at dawn and a 3 A rise at noon cannot bound one 3 A load if, at some bin
    # between them, at most 1 A of load fits under what the sun can give.
    n = 400
    net = _ramp_solar(n)
    net[100:300] -= 3.0
    most = np.full(n, np.inf)
    most[120:130] = 1.0
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=400, max_load_A=most)
    assert np.abs(events).max() == 0.0
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=400)
    assert events[200] == pytest.approx(3.0, abs=0.1)


def test_a_load_still_on_when_a_charger_takes_over_runs_until_then():
    # A 1.8 A load switches on at bin 100 under the sun; from bin 150 a charger regulates
    # the bank (its switch-off, if any, shows no step). Kirchhoff says the load was on at
    # least until bin 150; with no hold following it, an unpaired fall is not a load.
    n = 300
    net = _ramp_solar(n)
    net[100:] -= 1.8
    hidden = np.zeros(n, dtype=bool)
    hidden[150:] = True
    seen = np.zeros(n, dtype=bool)
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=300,
                                     hidden=hidden, seen=seen, carry_bins=60)
    expected = np.zeros(n)
    expected[100:150] = 1.8
    np.testing.assert_allclose(events, expected, atol=0.06)
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=300)
    assert np.abs(events).max() == 0.0
    # Switched on longer before the hold than carry_bins: not carried.
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=300,
                                     hidden=hidden, seen=seen, carry_bins=30)
    assert np.abs(events).max() == 0.0


def test_a_large_pair_longer_than_allowed_is_not_a_load():
    # A 25 A fall and rise 60 bins apart: a charger pausing, not a kettle (big loads are short).
    n = 300
    net = _ramp_solar(n) + 25.0
    net[100:160] -= 25.0
    events, _, _ = _load_step_events(net, step_min_A=0.6, amp_max_A=50.0, max_bins=300,
                                     big_A=8.0, big_max_bins=15)
    assert np.abs(events).max() == 0.0


def test_load_under_a_bank_held_by_a_charger_is_the_load_of_the_same_hours_on_other_days():
    # 2 A all the time (48 Ah a day). On the second night a charger holds the full bank
    # from 01:00 to 07:00: net 0 A at 13.6 V (charged LiFePO4), the 12 Ah it delivers equal the load.
    start = pd.Timestamp("2026-01-12", tz="Europe/Oslo").tz_convert("UTC")
    t = pd.date_range(start, start + pd.Timedelta(days=3), freq="60s", inclusive="left")
    local = t.tz_convert("Europe/Oslo")
    hold = np.asarray((local.day == 13) & (local.hour >= 1) & (local.hour < 7))
    rng = np.random.default_rng(3)
    net = np.where(hold, 0.0, -2.0) + rng.normal(0, 0.01, len(t))
    volt = np.where(hold, 13.6, 13.1)
    led = daily_ledger(long_frame(t, battery={"current_A": net, "voltage_V": volt}), _lfp_system()).set_index("date")
    day2 = led.loc[pd.Timestamp("2026-01-13").date()]
    assert day2["consumed_Ah"] == pytest.approx(48.0, rel=0.02)
    charged = sum(day2[f"charged_Ah_{s}"] for s in ("solar", "alternator", "shore", "other"))
    assert charged == pytest.approx(12.0, rel=0.05)


def test_load_under_a_charger_regulating_the_voltage_is_the_power_of_the_same_hours_on_other_days():
    # Common practice (constant-voltage charging): in absorption a charger holds the
    # bank voltage and supplies every load change itself, so the net current is the
    # bank's smooth taper and shows no load step. Loads draw constant power through
    # their converters (P = V x I), so at the held 14.2 V a 40 W load draws 40/14.2 A.
    # Four winter days (no sun): 26 W always on, a 40 W load 10:00-14:00 and
    # 19:00-20:00 (a step no larger than the evenings show is a load). Days 1-3 a
    # 20 A charger runs 09:00-17:00 in bulk (the steps show); on day 4 it holds
    # 14.2 V and the net current decays smoothly from 10 A.
    start = pd.Timestamp("2026-01-12", tz="Europe/Oslo").tz_convert("UTC")
    t = pd.date_range(start, start + pd.Timedelta(days=4), freq="60s", inclusive="left")
    local = t.tz_convert("Europe/Oslo")
    hour = np.asarray(local.hour + local.minute / 60.0)
    day = np.asarray(local.day) - 12
    rng = np.random.default_rng(4)
    power = 26.0 + np.where(((hour >= 10) & (hour < 14)) | ((hour >= 19) & (hour < 20)), 40.0, 0.0)
    charging = (hour >= 9) & (hour < 17)
    held = charging & (day == 3)
    volt = np.where(held, 14.2, np.where(charging, 13.4, 13.1)) + rng.normal(0, 0.003, len(t))
    load_A = power / volt
    taper = 10.0 * np.exp(-(hour - 9.0) / 2.0)
    net = np.where(held, taper, np.where(charging, 20.0, 0.0) - load_A) + rng.normal(0, 0.01, len(t))
    led = daily_ledger(long_frame(t, battery={"current_A": net, "voltage_V": volt}), _lfp_system())
    truth = pd.Series(load_A / 60.0).groupby(day).sum()
    np.testing.assert_allclose(led["consumed_Ah"].to_numpy(), truth.to_numpy(), rtol=0.02)


@pytest.mark.parametrize("scenario", ["autumn-van", "spring-truck"])
def test_simulated_single_shunt_consumed_Ah_mean_error_is_within_8_percent(scenario):
    # Against the simulator's truth (collector.simulated writes what really happened):
    # over ten days at 60 s the mean absolute daily error of consumed Ah is within 8 %
    # (measured 1.5 % autumn-van, 5.7 % spring-truck: one day of the truck's ten, a
    # satellite terminal's 7 h switched on in the same minute as the fridge and lost,
    # is -26 %).
    # The per-day ±8 % target is checked on the fixtures in tests/test_ledger.py; day-by-day
    # figures over seeds and intervals: benchmarks/single_shunt_accuracy.py.
    from drawdown.analysis.ledger import compute_ledger
    from drawdown.analysis.readings import split_channels
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate(scenario, days=10)
    frame = to_canonical(sim, interval_s=60, single_shunt=True)
    days = compute_ledger(split_channels(frame), sim.scenario.system).days
    est = dict(zip((d.isoformat() for d in days["date"]), days["consumed_Ah"]))
    err = [abs(est[d["date"]] / d["consumed_Ah"] - 1.0) for d in sim.truth["days"]]
    assert np.mean(err) <= 0.08


@pytest.mark.parametrize("interval_s", [10.0, 60.0])
@pytest.mark.parametrize("scenario", ["autumn-van", "spring-truck"])
def test_bundled_scenario_single_shunt_consumed_Ah_within_8_percent_on_every_day(scenario, interval_s):
    # Issue 3 "must show", against the simulator's truth (collector.simulated writes what
    # really happened): the bundled scenarios at their own length and seed (21 and 14
    # days), logged as one shunt at the default 10 s and at 60 s, every day within ±8 %.
    # Other seeds are not all there (benchmarks/single_shunt_accuracy.py: 263/280 days).
    from drawdown.analysis.ledger import compute_ledger
    from drawdown.analysis.readings import split_channels
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate(scenario)
    frame = to_canonical(sim, interval_s=interval_s, single_shunt=True)
    days = compute_ledger(split_channels(frame), sim.scenario.system).days
    est = dict(zip((d.isoformat() for d in days["date"]), days["consumed_Ah"]))
    assert len(est) == len(sim.truth["days"])
    for d in sim.truth["days"]:
        assert est[d["date"]] == pytest.approx(d["consumed_Ah"], rel=0.08), d["date"]


def test_hourly_error_sd_is_the_rms_of_hour_block_means():
    # Closed form: hour blocks with mean errors +1 A and -3 A give RMS sqrt((1 + 9) / 2) A;
    # a block covered for less than half an hour is left out.
    from drawdown.analysis.single_shunt import _hourly_error_sd

    bin_us = 60 * 1_000_000
    t_mid = np.arange(180) * bin_us + bin_us // 2  # three hours of 1-minute bins
    hrs = np.full(180, 1 / 60)
    err = np.concatenate([np.full(60, 1.0), np.full(60, -3.0), np.full(60, 50.0)])
    use = np.ones(180, dtype=bool)
    use[120:] = False
    use[120:130] = True  # 10 minutes of the third hour: too little to count
    assert _hourly_error_sd(err, hrs, t_mid, use) == pytest.approx(np.sqrt(5.0))


@pytest.mark.parametrize("scenario", ["autumn-van", "spring-truck"])
def test_simulated_single_shunt_95_percent_interval_covers_truth_on_most_days(scenario):
    # Against the simulator's truth: a calibrated 95 % interval misses a day with
    # probability 0.05, so 3 or more misses in 10 days has probability ~1 % (binomial).
    # Across both scenarios, their own seed and seeds 1-3, 10 s and 60 s, full length
    # (benchmarks/single_shunt_accuracy.py) it covered 280 of 280 days at a median
    # half-width of 15 % (10-day runs 160/160 at 14 %, 5-day runs 73/80 at 13 %; the
    # night-model interval it replaced: ~40 %).
    from drawdown.analysis.ledger import compute_ledger
    from drawdown.analysis.readings import split_channels
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate(scenario, days=10)
    frame = to_canonical(sim, interval_s=60, single_shunt=True)
    days = compute_ledger(split_channels(frame), sim.scenario.system).days.set_index("date")
    truth = {d["date"]: d["consumed_Ah"] for d in sim.truth["days"]}
    misses = sum(not (row.consumed_Ah_pi95_lo <= truth[row.Index.isoformat()] <= row.consumed_Ah_pi95_hi)
                 for row in days.itertuples())
    assert misses <= 2
    half = (days["consumed_Ah_pi95_hi"] - days["consumed_Ah_pi95_lo"]) / 2 / days["consumed_Ah"]
    assert half.median() < 0.25  # informative: not the ±40 % of the night-only model


def _van_with_alternator():
    return system_from_mapping({
        "site": {"latitude_deg": 60.4, "longitude_deg": 5.3, "timezone": "Europe/Oslo"},
        "battery": {"chemistry": "lifepo4", "nominal_voltage_V": 12.8, "rated_capacity_Ah": 200},
        "solar": [{"peak_power_W": 300}],
        "charger": [{"source": "alternator", "max_current_A": 30}]})


def test_charge_beyond_the_clear_sky_solar_limit_goes_to_the_last_plateau_source():
    # A 30 A alternator plateau (bins 100-200), then the bank keeps taking 8 A after the
    # drive while the arrays can give at most 2 A (clear-sky bound): 6 A of it is not solar.
    # Kirchhoff: the parts add up to the gross charge in every bin.
    from drawdown.analysis.single_shunt import _attribute

    n = 400
    gross = np.zeros(n)
    gross[100:200] = 30.0
    gross[200:300] = 8.0
    elev = np.full(n, 30.0)
    hour = np.full(n, 12.0)
    parts, _ = _attribute(gross, np.full(n, 1 / 60), elev, hour, _van_with_alternator(), 60.0,
                          solar_max_A=np.full(n, 2.0))
    np.testing.assert_allclose(sum(parts.values()), gross, atol=1e-9)
    assert parts["solar"].max() <= 2.0 + 1e-9
    np.testing.assert_allclose(parts["alternator"][205:295], 6.0, atol=1e-9)


def test_a_rise_far_below_every_charger_rating_is_not_a_charger_plateau():
    # The only charger is a 30 A alternator; a 5 A rise lasting an hour at noon with no
    # hold nearby is the sun coming out (or a load switching off), not the alternator.
    from drawdown.analysis.single_shunt import _attribute

    n = 300
    gross = np.full(n, 2.0)
    gross[100:160] = 7.0
    parts, _ = _attribute(gross, np.full(n, 1 / 60), np.full(n, 30.0), np.full(n, 12.0),
                          _van_with_alternator(), 60.0)
    assert parts["alternator"].sum() == 0.0
    np.testing.assert_allclose(parts["solar"], gross)


def test_single_shunt_in_sample_chunks_gives_the_same_ledger_as_one_pass(monkeypatch):
    # The single-shunt path sums samples into bins in chunks (memory on a year at 1 Hz);
    # the chunk size must not change any figure.
    import drawdown.analysis.single_shunt as single_shunt_mod
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate("autumn-van", days=3)
    frame = to_canonical(sim, interval_s=60, single_shunt=True)
    one = daily_ledger(frame, sim.scenario.system)
    monkeypatch.setattr(single_shunt_mod, "SAMPLE_CHUNK", 997)
    chunked = daily_ledger(frame, sim.scenario.system)
    pd.testing.assert_frame_equal(one, chunked, rtol=1e-9)


def test_hour_top_up_counts_the_load_the_hours_visible_minutes_already_carry():
    # Closed form. One clock hour of 1-minute bins, typical 3 A (3 Ah in the hour).
    # Minutes 0-9 are read (a kettle: 12 A, 2 Ah); minutes 10-59 are hidden, 1 A seen.
    # The hour already carries 2 + 50/60 Ah, so the hidden minutes get (3 - 2.8333) Ah
    # spread over 50/60 h: +0.2 A. Without the read minutes they would get +2 A.
    from drawdown.analysis.single_shunt import _hour_topped_up

    bin_us = 60 * 1_000_000
    t_mid = np.arange(60) * bin_us + bin_us // 2
    hrs = np.full(60, 1 / 60)
    typical = np.full(60, 3.0)
    seen = np.full(60, 1.0)
    use = np.arange(60) >= 10
    other = np.where(use, 0.0, 12.0)
    out = _hour_topped_up(seen, typical, hrs, t_mid, use, other_A=other)
    np.testing.assert_allclose(out[use], 1.2)
    assert np.all(out[~use] == 0.0)
    np.testing.assert_allclose(_hour_topped_up(seen, typical, hrs, t_mid, use)[use], 3.0)
