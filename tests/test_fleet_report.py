"""Fleet answers (analysis/fleet.py): the fade trend, the flags, and the fleet report on Dask.

Outside references: a weighted straight line is checked against numpy.polyfit (weights 1/sigma,
the same estimator as WLS with weights 1/sigma^2; its covariance with ``cov="unscaled"`` is the
known-variance one); the end-of-life mark of 80 % of rated capacity is the trade's (IEEE 1188
for VRLA replacement; LiFePO4 cycle-life ratings quoted to 80 % -- common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from drawdown.analysis import fleet


def _months(caps: list[float | None], half95: float = 4.0) -> list[dict]:
    return [{"month": f"2026-{k + 1:02d}", "pairs": 2, "usable_Ah": c,
             "usable_Ah_ci95": [c - half95, c + half95] if c is not None else None} for k, c in enumerate(caps)]


def test_fade_is_the_weighted_slope_in_percent_of_rated_per_month():
    caps = [200.0, 197.5, 196.0, 193.0, 191.5]
    half = [3.0, 4.0, 2.0, 5.0, 3.0]
    months = [{"month": f"2026-{k + 1:02d}", "usable_Ah": c, "usable_Ah_ci95": [c - h, c + h]}
              for k, (c, h) in enumerate(zip(caps, half))]
    fade, ci, why = fleet.fade_trend(months, rated_Ah=200.0)
    sigma = np.array(half) / 1.96
    (slope, _), cov = np.polyfit(np.arange(5.0), caps, 1, w=1 / sigma, cov="unscaled")
    assert why is None
    assert fade == pytest.approx(-100 * slope / 200.0, rel=1e-9)
    assert 1.0 < fade < 1.2                              # about 2.1 Ah a month of 200 Ah
    half_known = 1.96 * np.sqrt(cov[0, 0]) * 100 / 200.0
    assert ci[1] - ci[0] >= 2 * half_known - 1e-9          # never narrower than the months' own errors
    assert ci[0] < fade < ci[1]


def test_a_fade_needs_two_months_with_a_capacity():
    fade, ci, why = fleet.fade_trend(_months([200.0, None, None]), rated_Ah=200.0)
    assert fade is None and ci is None and "at least two months" in why and "1 month had one" in why


def test_a_steady_bank_has_a_fade_interval_around_zero():
    fade, ci, _ = fleet.fade_trend(_months([200.0, 201.0, 199.0, 200.5, 199.5]), rated_Ah=200.0)
    assert abs(fade) < 0.5 and ci[0] < 0 < ci[1]


def test_use_up_flags_a_quarter_more_than_the_vehicles_own_history():
    quiet = [{"complete": True, "consumed_Ah": 40.0 + (k % 3)} for k in range(10)]
    busy = [{"complete": True, "consumed_Ah": 55.0 + (k % 3)} for k in range(10)]
    up, why = fleet._use_flag(quiet + busy)
    assert up and "+" in why
    assert fleet._use_flag(quiet + quiet)[0] is False
    assert fleet._use_flag(quiet[:5] + busy[:5])[0] is False   # too few days each side to say


def test_solar_months_leave_out_a_month_with_a_few_days():
    class R:
        solar = {"days": [{"date": f"2026-09-{d:02d}", "performance_ratio": 0.9} for d in (27, 28, 29, 30)]
                 + [{"date": f"2026-10-{d:02d}", "performance_ratio": 0.8} for d in range(1, 32)]
                 + [{"date": f"2026-11-{d:02d}", "performance_ratio": 0.6 if d % 2 else 0.7} for d in range(1, 31)]
                 + [{"date": "2026-12-01", "performance_ratio": 0.1}]}
    first, last = fleet._solar_months(R(), None)  # type: ignore[arg-type]
    assert first == pytest.approx(0.8) and last == pytest.approx(0.65)


def test_most_urgent_first():
    rows = [{"vehicle": v, "figures": {"urgency": u, "usable_Ah": a, "rated_Ah": 200.0}}
            for v, u, a in (("van-a", 0.1, 190.0), ("van-b", 5.3, 150.0), ("van-c", 6.0, None), ("van-d", 0.1, 180.0))]
    assert [r["vehicle"] for r in fleet.sort_by_urgency(rows)] == ["van-c", "van-b", "van-d", "van-a"]


# -- on a simulated fleet, through the real command line and real Dask processes ------------------

import json  # noqa: E402
import os  # noqa: E402
import signal  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

from drawdown.cli import main  # noqa: E402

DASK = str(Path(sys.executable).with_name("dask"))


@pytest.fixture(scope="module")
def fleet_dataset_dir(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("fleet")
    sim = tmp / "sim"
    assert main(["--quiet", "simulate", "--fleet", "4", "--days", "21", "--interval", "120", "--seed", "3",
                 "--out", str(sim)]) == 0
    dataset = tmp / "dataset"
    assert main(["--quiet", "fleet", "ingest", str(sim), "--dataset", str(dataset)]) == 0
    return sim, dataset


def _report_json(capsys, argv: list[str]) -> dict:
    capsys.readouterr()
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def _vehicle_report(capsys, sim: Path, name: str, tmp: Path) -> dict:
    """``drawdown report --json`` on the vehicle's own store (its export imported)."""
    store = tmp / f"{name}.sqlite"
    base = ["--quiet", "--store", str(store), "--system", str(sim / name / "system.toml")]
    assert main([*base, "import", str(sim / name / "readings.parquet")]) == 0
    return _report_json(capsys, [*base, "report", "--json"])


@pytest.mark.slow
def test_fleet_report_gives_each_vehicle_exactly_what_drawdown_report_gives(fleet_dataset_dir, capsys, tmp_path):
    sim, dataset = fleet_dataset_dir
    out = _report_json(capsys, ["--quiet", "fleet", "report", "--dataset", str(dataset), "--workers", "2", "--json"])
    assert out["vehicles"] == 4 and out["workers"] == 2 and len(out["fleet"]) == 4
    assert [f["urgency"] for f in out["fleet"]] == sorted((f["urgency"] for f in out["fleet"]), reverse=True)
    for f in out["fleet"]:
        name = f["vehicle"]
        assert f["error"] is None, f["error"]
        own = _vehicle_report(capsys, sim, name, tmp_path)
        fleet_rep = out["reports"][name]
        assert fleet_rep["days"] == own["days"]            # every day's figures, the same
        assert fleet_rep["battery"] == own["battery"]
        assert fleet_rep["solar"] == own["solar"]
        assert f["usable_Ah"] == pytest.approx(own["battery"].get("usable_Ah"), abs=1e-3) \
            if own["battery"].get("usable_Ah") is not None else f["usable_Ah"] is None
        used = sorted(d["consumed_Ah"] for d in own["days"] if d["complete"])
        assert f["daily_use_Ah_p50"] == pytest.approx(float(np.percentile(used, 50)), abs=2e-3)


@pytest.mark.slow
def test_use_up_is_flagged_where_the_simulated_use_really_rose(fleet_dataset_dir, capsys):
    # The truth: the simulator's own consumed Ah per day (truth.json), on the days the report
    # counts as complete, halved as the flag halves them. A vehicle flagged must have a true rise
    # above the +25 % mark; one not flagged must not (a margin of 5 points each side).
    sim, dataset = fleet_dataset_dir
    out = _report_json(capsys, ["--quiet", "fleet", "report", "--dataset", str(dataset), "--json"])
    seen = {True: 0, False: 0}
    for f in out["fleet"]:
        truth = json.loads((sim / f["vehicle"] / "truth.json").read_text())
        complete = {d["date"] for d in out["reports"][f["vehicle"]]["days"] if d["complete"]}
        used = [d["consumed_Ah"] for d in truth["consumed_Ah_by_day"] if d["date"] in complete]
        half = len(used) // 2
        rise = float(np.median(used[half:]) / np.median(used[:half])) - 1.0
        flagged = "use_up" in f["flags"]
        if abs(rise - fleet.USE_UP_FLAG_SHARE) > 0.05:
            assert flagged == (rise > fleet.USE_UP_FLAG_SHARE), (f["vehicle"], rise, f["flag_reasons"])
            seen[flagged] += 1
    assert seen[True] >= 1 and seen[False] >= 1, seen   # both kinds in this fleet (seasonal heating, a jump)


def _start(argv: list[str], log: Path) -> subprocess.Popen:
    env = {**os.environ, "PYBAMM_DISABLE_TELEMETRY": "true"}
    return subprocess.Popen(argv, stdout=open(log, "wb"), stderr=subprocess.STDOUT, env=env,
                            start_new_session=True)


@pytest.fixture()
def dask_cluster(tmp_path):
    """A real dask.distributed scheduler and two single-threaded worker processes (the CLI's
    --scheduler path); the address comes from the scheduler file."""
    sched_file = tmp_path / "scheduler.json"
    procs = [_start([DASK, "scheduler", "--scheduler-file", str(sched_file), "--port", "0", "--no-dashboard",
                     "--host", "127.0.0.1"], tmp_path / "scheduler.log")]
    deadline = time.monotonic() + 60
    while not sched_file.exists() and time.monotonic() < deadline:
        time.sleep(0.2)
    assert sched_file.exists(), (tmp_path / "scheduler.log").read_text()
    address = json.loads(sched_file.read_text())["address"]
    for k in range(2):
        procs.append(_start([DASK, "worker", address, "--nworkers", "1", "--nthreads", "1", "--no-dashboard",
                             "--memory-limit", "2GB", "--name", f"w{k}"], tmp_path / f"worker{k}.log"))
    from dask.distributed import Client

    with Client(address, timeout=60) as c:
        c.wait_for_workers(2, timeout=60)
    yield address, procs
    for p in procs:
        try:
            os.killpg(p.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        p.wait(timeout=30)


@pytest.mark.slow
def test_fleet_report_runs_on_an_existing_scheduler(fleet_dataset_dir, dask_cluster, capsys):
    _, dataset = fleet_dataset_dir
    address, _ = dask_cluster
    out = _report_json(capsys, ["--quiet", "fleet", "report", "--dataset", str(dataset), "--scheduler", address,
                                "--json"])
    assert out["scheduler"] == address and out["workers"] == 2
    assert len(out["fleet"]) == 4 and all(f["error"] is None for f in out["fleet"])


@pytest.mark.slow
def test_a_worker_killed_mid_run_does_not_stop_the_report(fleet_dataset_dir, dask_cluster):
    from dask.distributed import Client

    from drawdown.analysis.fleet import fleet_report

    _, dataset = fleet_dataset_dir
    address, procs = dask_cluster
    killed = threading.Event()

    def kill_when_busy() -> None:
        with Client(address, timeout=60) as c:
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline:
                busy = [w for w, tasks in c.processing().items() if tasks]
                if busy:
                    os.killpg(procs[1].pid, signal.SIGKILL)  # one worker gone with its task
                    killed.set()
                    return
                time.sleep(0.05)

    killer = threading.Thread(target=kill_when_busy)
    killer.start()
    out = fleet_report(str(dataset), scheduler=address)
    killer.join()
    assert killed.is_set()
    assert len(out["fleet"]) == 4
    assert all(f["error"] is None for f in out["fleet"]), [f["error"] for f in out["fleet"]]


@pytest.fixture(scope="module")
def long_fleet(tmp_path_factory):
    """100 days of three invented vans (seed 5: van-001 is an AGM bank fading ~1.8 % of rated a month)."""
    tmp = tmp_path_factory.mktemp("long-fleet")
    sim, dataset = tmp / "sim", tmp / "dataset"
    assert main(["--quiet", "simulate", "--fleet", "3", "--days", "100", "--interval", "300", "--seed", "5",
                 "--out", str(sim)]) == 0
    assert main(["--quiet", "fleet", "ingest", str(sim), "--dataset", str(dataset)]) == 0
    return sim, dataset


def _check_fade_recovered(out: dict, sim: Path) -> None:
    with_fade = 0
    for f in out["fleet"]:
        truth = json.loads((sim / f["vehicle"] / "truth.json").read_text())
        if f["fade_pct_per_month"] is None:
            assert f["fade_why"]
            continue
        with_fade += 1
        lo, hi = f["fade_pct_per_month_ci95"]
        assert lo <= truth["fade_pct_per_month"] <= hi, (f["vehicle"], truth["fade_pct_per_month"], lo, hi)
    assert with_fade >= 2
    fast = next(f for f in out["fleet"] if f["vehicle"] == "van-001")
    assert "fading_fast" in fast["flags"] and fast["fade_pct_per_month"] > 1.0


@pytest.mark.slow
def test_the_fade_trend_recovers_the_simulated_fade_within_its_interval(long_fleet, capsys):
    sim, dataset = long_fleet
    out = _report_json(capsys, ["--quiet", "fleet", "report", "--dataset", str(dataset), "--json"])
    assert out["tasks"] == 3                              # each vehicle fits one task: whole
    assert all(f["parts"] == [] for f in out["fleet"])
    _check_fade_recovered(out, sim)


def test_parts_are_whole_local_months_within_the_budget_and_cover_everything():
    rows = {"2026-01": 9, "2026-02": 8, "2026-03": 9, "2026-04": 3, "2026-05": 9}
    assert fleet.plan_parts(rows, "Europe/Berlin", max_readings=100) == [(None, None)]     # fits: one task
    parts = fleet.plan_parts(rows, "Europe/Berlin", max_readings=12)
    # Jan | Feb | Mar+Apr | May: each within 12 readings, a month never split
    assert parts == [(None, "2026-01-31T23:00:00+00:00"), ("2026-01-31T23:00:00+00:00", "2026-02-28T23:00:00+00:00"),
                     ("2026-02-28T23:00:00+00:00", "2026-04-30T22:00:00+00:00"), ("2026-04-30T22:00:00+00:00", None)]
    # a month over the budget is still one part (the smallest unit)
    assert len(fleet.plan_parts({"2026-01": 50, "2026-02": 50}, "UTC", max_readings=10)) == 2


def test_the_task_budget_follows_the_workers_memory():
    # 4 GB (dask's "4GB" is 4e9 bytes) must take a month at 1 Hz on five channels in one task:
    # 31 x 86,400 x 5 = 13.4 M readings, measured at 2.4 GB peak on such a worker
    assert 31 * 86_400 * 5 <= fleet.task_readings_for(4e9) <= 16_000_000
    assert fleet.task_readings_for(8e9) > 2 * fleet.task_readings_for(4e9) - 3_000_000
    assert fleet.task_readings_for(None) == fleet.TASK_READINGS
    assert fleet.task_readings_for(0.5e9) == 1_000_000          # never below a floor


@pytest.mark.slow
def test_a_long_vehicle_is_analysed_in_month_parts_each_as_drawdown_report_from_to_gives_it(long_fleet, capsys,
                                                                                             tmp_path):
    import pandas as pd

    from drawdown.analysis.capacity import estimate_capacity
    from drawdown.analysis.system import parse_system
    from drawdown.collector import fleet_dataset

    sim, dataset = long_fleet
    budget = 40_000  # readings a task; at 300 s on these vans a month is ~25-45 k: parts of one or two months
    out = _report_json(capsys, ["--quiet", "fleet", "report", "--dataset", str(dataset), "--json",
                                "--task-readings", str(budget)])
    assert out["tasks"] > 3 * 2
    for f in out["fleet"]:
        name = f["vehicle"]
        assert f["error"] is None and "part_failed" not in f["flags"], f
        parts = f["parts"]
        assert len(parts) >= 3 and parts[0]["start"] is None and parts[-1]["end"] is None
        assert all(a["end"] == b["start"] for a, b in zip(parts, parts[1:]))       # no gap, no overlap
        assert sum(p["readings"] for p in parts) == sum(fleet_dataset.month_rows(dataset, name).values())
        system_path = sim / name / "system.toml"
        tz = parse_system(system_path.read_text()).site.timezone
        store = tmp_path / f"{name}.sqlite"
        base = ["--quiet", "--store", str(store), "--system", str(system_path)]
        assert main([*base, "import", str(sim / name / "readings.parquet")]) == 0
        days: list[dict] = []
        pairs = []
        for p in parts:
            argv = [*base, "report", "--json"]
            if p["start"]:
                argv += ["--from", pd.Timestamp(p["start"]).tz_convert(tz).date().isoformat()]
            if p["end"]:
                argv += ["--to", (pd.Timestamp(p["end"]).tz_convert(tz) - pd.Timedelta(days=1)).date().isoformat()]
            own = _report_json(capsys, argv)
            days += own["days"]
            pairs += own["battery"]["anchor_pairs"]
        fleet_rep = out["reports"][name]
        for a, b in zip(fleet_rep["days"], days):
            assert a == b, {k: (a.get(k), b.get(k)) for k in set(a) | set(b) if a.get(k) != b.get(k)}
        assert fleet_rep["days"] == days                  # each part's days are drawdown report --from --to's
        assert fleet_rep["battery"]["anchor_pairs"] == pairs
        assert [d["date"] for d in days] == sorted({d["date"] for d in days})   # every local day once
        # the capacity: the one-store estimator over every part's pairs
        reports = [fleet.analyse_part(str(dataset), name, p["start"], p["end"], False)["report"] for p in parts]
        est = estimate_capacity([q for r in reports for q in r.capacity.pairs], parse_system(system_path.read_text()))
        if est.usable_Ah is None:
            assert f["usable_Ah"] is None and f["usable_Ah_why"]
        else:
            assert f["usable_Ah"] == pytest.approx(est.usable_Ah, rel=1e-9)
            assert f["usable_Ah_ci95"] == pytest.approx(list(est.ci95_Ah), rel=1e-9)
    _check_fade_recovered(out, sim)
