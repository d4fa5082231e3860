"""The PyBaMM bank of the independent validation family (fixtures/independent/bank_pybamm.py).

Outside references: PyBaMM run in the test, Prada2013 set (Prada et al., J. Electrochem. Soc. 160
(2013) A616), SPMe model; a typical 12.8 V LiFePO4 trade rest-voltage table (from memory).
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

os.environ.setdefault("PYBAMM_DISABLE_TELEMETRY", "true")
pybamm = pytest.importorskip("pybamm")

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "fixtures"))
from independent import bank_pybamm as bp  # noqa: E402

STEP_S = 10


@pytest.fixture(autouse=True)
def _cache_in_tmp(tmp_path, monkeypatch):
    """Keep the tests' results out of the shared cache folder."""
    monkeypatch.setattr(bp, "CACHE_DIR", tmp_path / "pybamm_cache")


@pytest.fixture(scope="module")
def bank() -> bp.PybammBank:
    b = bp.PybammBank(chemistry="lifepo4", capacity_Ah=200.0, nominal_voltage_V=12.8)
    b.usable_Ah  # noqa: B018  (runs the capacity protocol once for the module)
    return b


def _drive(hours: float, *, load_W=0.0, solar_avail_W=0.0, alternator_avail_A=0.0,
           shore_avail_A=0.0, temperature_C=25.0, absorption_V=14.2, float_V=13.5,
           absorption_s=3600.0, tail_A=4.0) -> pd.DataFrame:
    """A hand-made Drive (README.md's columns and attrs); each quantity constant or an array."""
    n = int(round(hours * 3600 / STEP_S))
    idx = pd.date_range(pd.Timestamp("2024-06-01 00:00", tz="UTC"), periods=n, freq=f"{STEP_S}s")

    def arr(x):
        a = np.asarray(x, float)
        return np.full(n, float(a)) if a.ndim == 0 else a

    df = pd.DataFrame({"load_W": arr(load_W), "solar_avail_W": arr(solar_avail_W),
                       "array_connected": np.ones(n, bool), "alternator_avail_A": arr(alternator_avail_A),
                       "shore_avail_A": arr(shore_avail_A), "temperature_C": arr(temperature_C)}, index=idx)
    ch = {s: {"max_A": lim, "absorption_V": absorption_V, "float_V": float_V, "absorption_s": absorption_s,
              "tail_A": tail_A, "rebulk_V": 13.2} for s, lim in (("solar", 30.0), ("alternator", 30.0),
                                                                 ("shore", 40.0))}
    df.attrs = {"step_s": STEP_S, "nominal_voltage_V": 12.8, "chargers": ch, "solar_max_A": 30.0,
                "absorption_V": absorption_V, "float_V": float_V, "absorption_s": absorption_s}
    return df


def test_usable_Ah_is_pybamms_own_c20_capacity(bank):
    """PyBaMM run in the test, Prada2013 set (Prada et al., J. Electrochem. Soc. 160 (2013) A616):
    one SPMe cell emptied at C/20, charged at C/5 to 3.55 V, held there to C/20, then discharged
    at C/20 to 2.0 V; the bank's usable_Ah is that Ah x 200 Ah / 2.3 Ah."""
    pv = pybamm.ParameterValues("Prada2013")
    cell_Ah = pv["Nominal cell capacity [A.h]"]
    i20 = cell_Ah / 20.0
    exp = pybamm.Experiment([f"Discharge at {i20} A until 2.0 V", "Rest for 1 hour",
                             f"Charge at {cell_Ah / 5} A until 3.55 V",
                             f"Hold at 3.55 V until {0.05 * cell_Ah} A",
                             f"Discharge at {i20} A until 2.0 V"])
    pv.update({"Ambient temperature [K]": 298.15, "Initial temperature [K]": 298.15})
    sol = pybamm.Simulation(pybamm.lithium_ion.SPMe(), parameter_values=pv, experiment=exp).solve()
    q = sol.cycles[-1]["Discharge capacity [A.h]"].entries
    v = sol.cycles[-1]["Voltage [V]"].entries
    cell_c20 = q[-1] - q[0]
    assert v[-1] == pytest.approx(2.0, abs=1e-3)
    expected = cell_c20 * 200.0 / cell_Ah
    print(f"\nPyBaMM C/20 cell capacity {cell_c20:.4f} Ah -> bank {expected:.3f} Ah; "
          f"PybammBank.usable_Ah {bank.usable_Ah:.3f} Ah")
    assert bank.usable_Ah == pytest.approx(expected, rel=1e-3)
    assert 0.9 * 200.0 < bank.usable_Ah < 1.05 * 200.0
    assert bank.n_series == 4 and bank.n_parallel == pytest.approx(200.0 / cell_Ah)


def test_identity_and_ah_balance(bank):
    """current_A = sources + load at every row; its integral equals PyBaMM's discharge-capacity
    change x n_parallel (sign flipped), and the integral of PyBaMM's own instantaneous current
    agrees within 0.5 %."""
    n = int(6 * 3600 / STEP_S)
    k = np.arange(n)
    load = 20.0 + 180.0 * ((k // 37) % 3 == 0) + 60.0 * ((k // 11) % 2 == 0)
    solar = 250.0 * (1.0 + np.sin(k / 300.0)) * (k > n // 4)
    alt = np.where((k > n // 2) & (k < 3 * n // 4), 25.0, 0.0)
    shore = np.where(k > 5 * n // 6, 15.0, 0.0)
    drive = _drive(6.0, load_W=load, solar_avail_W=solar, alternator_avail_A=alt, shore_avail_A=shore)
    res = bank.run(drive, initial_soc=0.5)
    assert list(res.index) == list(drive.index)
    ident = res.current_A - (res.solar_A + res.alternator_A + res.shore_A + res.load_A)
    assert float(ident.abs().max()) < 1e-6
    ah_net = float(res.current_A.sum()) * STEP_S / 3600.0
    dq = res.attrs["final_discharge_Ah"] - float(res.pybamm_discharge_Ah.iloc[0])
    assert ah_net == pytest.approx(-dq, rel=1e-6, abs=1e-6)
    inst = res.pybamm_current_A.to_numpy()
    ah_inst = float(np.sum(inst)) * STEP_S / 3600.0
    print(f"\nnet {ah_net:.4f} Ah, -dQ x n_parallel {-dq:.4f} Ah, instantaneous-current sum {ah_inst:.4f} Ah")
    assert abs(ah_inst - (-dq)) <= 0.005 * abs(dq)
    soc_end = res.attrs["final_soc_pct"]
    assert soc_end - 50.0 == pytest.approx(100.0 * ah_net / bank.usable_Ah, abs=1e-9)
    assert float(res.soc_pct.iloc[0]) == pytest.approx(50.0)
    for c in ("solar_A", "alternator_A", "shore_A"):
        assert float(res[c].min()) >= -1e-9
    assert float(res.load_A.max()) <= 1e-6
    assert float(res.alternator_A.max()) <= 25.0 + 1e-6 and float(res.shore_A.max()) <= 15.0 + 1e-6
    # each source is used where it had input, and not where it had none (a row just before a
    # source starts carries the 0.01 s input ramp: 0.05 % of its current)
    none = (alt == 0) & (np.r_[alt[1:], 0.0] == 0)
    assert float(res.alternator_A[alt > 0].mean()) > 5.0 and float(res.alternator_A[none].abs().max()) == 0.0
    # the constant-power load is load_W / V
    lp = -drive.load_W / res.voltage_V
    assert float((res.load_A - lp).abs().max()) < 0.05


def test_constant_power_discharge_matches_direct_pybamm(bank):
    """The bank under a constant 150 W for 2 h, no source, equals a PyBaMM constant-power
    experiment on one cell at 150 W / (4 x n_parallel) from the same rested state."""
    drive = _drive(2.0, load_W=150.0)
    res = bank.run(drive, initial_soc=0.8)
    start = bank.initial_state(0.8)
    p_cell = 150.0 / (bank.n_series * bank.n_parallel)
    model = pybamm.lithium_ion.SPMe()
    model.set_initial_conditions_from(start)
    pv = pybamm.ParameterValues("Prada2013")
    pv.update({"Ambient temperature [K]": 298.15, "Initial temperature [K]": 298.15})
    sol = pybamm.Simulation(model, parameter_values=pv,
                            experiment=pybamm.Experiment([f"Discharge at {p_cell} W for 2 hours"])).solve()
    v_direct = sol["Voltage [V]"].entries[-1] * bank.n_series
    ah_direct = (sol["Discharge capacity [A.h]"].entries[-1] - sol["Discharge capacity [A.h]"].entries[0]) \
        * bank.n_parallel
    ah_bank = -float(res.current_A.sum()) * STEP_S / 3600.0
    print(f"\ndirect PyBaMM: {ah_direct:.4f} Ah, end {v_direct:.4f} V; bank: {ah_bank:.4f} Ah, "
          f"last row {res.voltage_V.iloc[-1]:.4f} V")
    assert ah_bank == pytest.approx(ah_direct, rel=2e-3)
    assert float(res.voltage_V.iloc[-1]) == pytest.approx(v_direct, abs=0.004)
    assert float(res.current_A.mean()) == pytest.approx(-150.0 / float(res.voltage_V.mean()), rel=2e-3)


def test_absorption_holds_voltage_and_hides_a_load_step(bank):
    """Shore 40 A at 14.2 V absorption on a nearly full bank, a 250 W load stepping on and off
    every 5 min: the terminal voltage stays within 5 mV per cell of the set-point, the load shows
    in load_A and shore_A, not in the net current."""
    n = int(1.5 * 3600 / STEP_S)
    k = np.arange(n)
    load = 5.0 + 250.0 * ((k // 30) % 2 == 1)
    drive = _drive(1.5, load_W=load, shore_avail_A=40.0, absorption_s=6 * 3600.0, tail_A=0.01)
    res = bank.run(drive, initial_soc=0.95)
    held = res.regulating.to_numpy()
    assert held[n // 3:].all(), "the bank should sit at the absorption voltage after the first half hour"
    late = res.iloc[n // 3:]
    dev = float((late.voltage_V - 14.2).abs().max())
    steps = np.nonzero(np.diff(load) != 0)[0] + 1
    steps = steps[steps > n // 3]
    jumps_net = np.array([late_val(res.current_A, i) for i in steps])
    jumps_load = np.array([late_val(res.load_A, i) for i in steps])
    jumps_shore = np.array([late_val(res.shore_A, i) for i in steps])
    print(f"\nmax |V - 14.2 V| {1000 * dev:.3f} mV (bank), net-current jumps at the load steps "
          f"{np.abs(jumps_net).max():.4f} A vs load jumps {np.abs(jumps_load).min():.2f} A")
    assert dev <= 0.005 * bank.n_series
    assert np.abs(jumps_load).min() > 15.0                      # the load did step
    np.testing.assert_allclose(jumps_shore, -jumps_load, atol=0.1)   # the charger covered it
    assert np.abs(jumps_net).max() < 0.01 * np.abs(jumps_load).min()


def late_val(s: pd.Series, i: int) -> float:
    """Change of ``s`` from the row before ``i`` to row ``i``."""
    return float(s.iloc[i] - s.iloc[i - 1])


def test_float_after_absorption_time(bank):
    """After absorption_s at the absorption voltage a charger drops to float: while the bank's
    own voltage is above float the charger delivers nothing, then it holds 13.5 V and covers the
    load."""
    drive = _drive(3.0, load_W=150.0, shore_avail_A=30.0, absorption_s=1200.0, tail_A=0.01)
    res = bank.run(drive, initial_soc=0.97)
    sp = res.setpoint_V.to_numpy()
    first_float = int(np.argmax(sp < 14.0))
    assert sp[0] == pytest.approx(14.2) and sp[-1] == pytest.approx(13.5) and first_float > 0
    held_abs = res.regulating.to_numpy()[:first_float].sum() * STEP_S
    assert held_abs == pytest.approx(1200.0, abs=STEP_S)
    after = res.iloc[first_float:]
    assert float(after.voltage_V.max()) <= 14.2 + 1e-3
    above = (after.voltage_V > 13.5 + 0.004).to_numpy()
    assert above[:10].all()                                   # the bank first sits above float
    assert float(np.max(after.shore_A.to_numpy()[above], initial=0.0)) < 1e-6
    last = res.iloc[-180:]                                    # the last half hour
    assert last.regulating.all()
    assert float((last.voltage_V - 13.5).abs().max()) <= 0.004
    np.testing.assert_allclose(last.shore_A, -last.load_A, atol=0.3)


def test_low_voltage_disconnect_is_noted(bank):
    """A bank nearly empty under a heavy load reaches the set's cut-off: the loads are dropped and
    the run says so; soc_pct is not clipped."""
    drive = _drive(1.0, load_W=200.0)
    res = bank.run(drive, initial_soc=0.03)
    assert res.lvd.any() and not res.lvd.iloc[0]
    first = int(np.argmax(res.lvd.to_numpy()))
    assert float(res.load_A.iloc[first + 1:].abs().max()) == 0.0
    assert any("low-voltage disconnect" in n for n in res.attrs["notes"])
    assert float(res.voltage_V.iloc[first - 1]) < 3.0 * bank.n_series
    assert 0.0 < float(res.soc_pct.min()) < 3.0       # 200 W is above C/20: cut-off before 0 %


def test_ocv_curve_vs_trade_table(bank):
    """The bank OCV from PyBaMM's open-circuit potentials against a typical 12.8 V LiFePO4 trade
    table (from memory): the difference is measured and printed; the curve is finite, increasing,
    and agrees with the voltage of a PyBaMM cell rested 1 h at 50 %."""
    grid = np.linspace(0.0, 100.0, 101)
    ocv = bank.ocv_curve(grid)
    assert np.isfinite(ocv).all()
    assert (np.diff(ocv) > 0).all()
    table = bp.trade_table_ocv_12v8()
    mine = bank.ocv_curve(table.index.to_numpy(float))
    diff = mine - table.to_numpy()
    lines = [f"{int(s):3d} %  PyBaMM {m:7.3f} V  table {t:6.2f} V  diff {d:+.3f} V"
             for s, m, t, d in zip(table.index, mine, table.to_numpy(), diff)]
    mid = (table.index >= 20) & (table.index <= 90)
    print("\n" + "\n".join(lines) + f"\nmax |diff| 20-90 %: {np.abs(diff[mid]).max():.3f} V")
    assert np.isfinite(diff).all()
    assert np.abs(diff[mid]).max() < 0.6              # same chemistry: same plateau within 0.6 V
    rested = bank.initial_state(0.5)["Voltage [V]"].entries[-1] * bank.n_series
    assert float(bank.ocv_curve([50.0])[0]) == pytest.approx(rested, abs=0.02)


def test_run_is_cached(bank):
    drive = _drive(0.5, load_W=40.0, solar_avail_W=120.0)
    t0 = time.perf_counter()
    a = bank.run(drive, initial_soc=0.6)
    t1 = time.perf_counter()
    b = bank.run(drive, initial_soc=0.6)
    t2 = time.perf_counter()
    pd.testing.assert_frame_equal(a, b)
    assert list(bp.CACHE_DIR.glob("*.pkl"))
    assert t2 - t1 < 0.5 * (t1 - t0)
    c = bank.run(drive, initial_soc=0.61)
    assert float(c.soc_pct.iloc[0]) == pytest.approx(61.0)


def test_lead_acid_is_refused():
    with pytest.raises(NotImplementedError, match="lead-acid"):
        bp.PybammBank(chemistry="agm")


@pytest.mark.slow
def test_three_day_drive_with_inputs_changing_every_row(bank):
    """A 3-day drive at 10 s whose inputs change on every row solves and balances row by row.

    Its run time is printed, not asserted: speed belongs in benchmarks/, where a loaded
    machine cannot turn it red."""
    n = int(3 * 86400 / STEP_S)
    t = np.arange(n) * STEP_S
    hour = (t / 3600.0) % 24
    rng = np.random.default_rng(3)
    load = 8.0 + 45.0 * ((t % 1800) < 600) + 100.0 * ((hour > 13) & (hour < 16))
    solar = 380.0 * np.clip(np.sin((hour - 6) / 12 * np.pi), 0, None) * (0.7 + 0.3 * rng.random(n))
    alt = np.where((hour > 9) & (hour < 10.5), 30.0, 0.0)
    drive = _drive(72.0, load_W=load, solar_avail_W=solar, alternator_avail_A=alt)
    t0 = time.perf_counter()
    res = bank.run(drive, initial_soc=0.6)
    el = time.perf_counter() - t0
    print(f"\n3-day drive: {el:.1f} s, {res.attrs['pybamm_solves']} solver calls")
    assert len(res) == n
    assert float((res.current_A - res.solar_A - res.alternator_A - res.shore_A - res.load_A).abs().max()) < 1e-6
