"""drawdown's figures against logs its own simulator did not make (the independent family).

    .venv/bin/python benchmarks/independent_accuracy.py [--half tune|report|all] [--cases NAME ...]
                                                        [--days N] [-q]

Each case of ``fixtures/independent/family.py`` (a generator of its own: measured
irradiance from pvlib's bundled typical-year files, an equivalent-circuit bank or a
PyBaMM bank, instant charger regulation, irregular 2-60 s sampling) is written as a
multi-channel and a single-shunt CSV, imported with the real importer into a
temporary store, analysed with ``analysis.report.build_report`` as ``drawdown report``
does, and scored against the generator's truth JSON:

* daily consumed Ah (multi-channel: within +-2 %; single shunt: the 95 % interval's
  coverage and median half-width, the point error on days with under an hour not seen,
  and the days more than 8 % off that do not say an hour or more was not seen);
* usable capacity (within +-5 % / +-10 %, the interval holding the truth, or null);
* the SoC series against the truth at every 10 minutes (largest gap in points);
* Ah booked to a source system.toml does not declare.

Tuning constants are chosen on ``--half tune`` (seeds 1, 3, 5, 7) and reported on
``--half report`` (seeds 2, 4, 6, 8). A measurement tool, not a test.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "fixtures"))

from drawdown.analysis.report import build_report  # noqa: E402
from drawdown.analysis.system import parse_system  # noqa: E402
from drawdown.collector.csv_file import import_file  # noqa: E402
from drawdown.collector.store import Store  # noqa: E402

MULTI_TOL = 0.02
SINGLE_TOL = 0.08
CAP_TOL = {"multi": 0.05, "single": 0.05}
LEAD_SINGLE_CAP_TOL = 0.10
SOC_TOL_PTS = 10.0


@dataclass
class Score:
    """Everything measured on one log (one case, seed and shunt layout)."""

    case: str
    seed: int
    layout: str                      # 'multi' or 'single'
    chemistry: str
    days: int = 0
    consumed_err: list[float] = field(default_factory=list)
    covered: list[bool] = field(default_factory=list)
    half_width: list[float] = field(default_factory=list)
    hidden_h: list[float] = field(default_factory=list)
    cap_err: float | None = None
    cap_in_ci: bool | None = None
    cap_why: str | None = None
    true_cap: float = 0.0
    soc_max_err: float | None = None
    undeclared_Ah: float = 0.0
    solar_err: list[float] = field(default_factory=list)
    rows: list[dict] = field(default_factory=list)   # one per scored day, for --dump
    soc_in_band: float | None = None                  # share of truth points inside the 95 % band
    soc_band_half: float | None = None                # median half-width of the band [points]


def analyse(csv: Path, system_text: str, tmp: Path) -> dict:
    """Import ``csv`` into a new store and build the report, as ``drawdown import`` + ``report`` do."""
    system = parse_system(system_text)
    store_path = csv.parent / f"{csv.stem}.sqlite"  # one store per log (cases share tmp)
    store = Store(store_path)
    try:
        import_file(csv, store, nominal_voltage_V=system.battery.nominal_voltage_V, tz=system.site.timezone)
        readings = store.read()
        rejected = sum(int(i["rows_rejected"]) for i in store.imports())
    finally:
        store.close()
    return build_report(readings, system, rows_rejected=rejected).to_json()


def score(case: str, seed: int, layout: str, report: dict, truth: dict) -> Score:
    b = truth["battery"]
    sc = Score(case, seed, layout, b["chemistry"], true_cap=float(b["usable_Ah"]))
    ours = {d["date"]: d for d in report["days"]}
    declared = set(truth.get("declared_sources") or [])
    for td in truth["days"]:
        d = ours.get(td["date"])
        if d is None or not td.get("complete", True) or not d["complete"] or td["consumed_Ah"] <= 0:
            continue
        sc.days += 1
        err = d["consumed_Ah"] / td["consumed_Ah"] - 1.0
        sc.consumed_err.append(err)
        pi = d.get("consumed_Ah_pi95")
        sc.covered.append(bool(pi and pi[0] <= td["consumed_Ah"] <= pi[1]))
        sc.half_width.append(0.5 * (pi[1] - pi[0]) / td["consumed_Ah"] if pi else 0.0)
        sc.hidden_h.append(float(d.get("hidden_load_h") or 0.0))
        sc.rows.append({"case": case, "seed": seed, "layout": layout, "date": td["date"],
                        "true_Ah": td["consumed_Ah"], "est_Ah": d["consumed_Ah"],
                        "lo_Ah": pi[0] if pi else None, "hi_Ah": pi[1] if pi else None,
                        "hidden_h": d.get("hidden_load_h"), "observed_share": d.get("observed_load_share"),
                        "true_solar_Ah": td["charged_Ah"].get("solar", 0.0),
                        "est_solar_Ah": d["charged_Ah"]["solar"]})
        t_sol = td["charged_Ah"].get("solar", 0.0)
        sc.solar_err.append((d["charged_Ah"]["solar"] - t_sol) / max(t_sol, 5.0))
        for src in ("solar", "alternator", "shore"):
            if src not in declared:
                sc.undeclared_Ah += float(d["charged_Ah"].get(src) or 0.0)
    bat = report["battery"]
    if bat["usable_Ah"] is not None:
        sc.cap_err = bat["usable_Ah"] / sc.true_cap - 1.0
        lo, hi = bat["usable_Ah_ci95"]
        sc.cap_in_ci = lo <= sc.true_cap <= hi
    else:
        sc.cap_why = bat.get("usable_Ah_why")
    series = report.get("soc_series")
    if series and truth.get("soc"):
        t_true = pd.DatetimeIndex(pd.to_datetime(truth["soc"]["t"], utc=True)).as_unit("us").asi8
        t_ours = pd.DatetimeIndex(pd.to_datetime(series["t"], utc=True)).as_unit("us").asi8
        inside = (t_true >= t_ours[0]) & (t_true <= t_ours[-1])
        if inside.any():
            est = np.interp(t_true[inside], t_ours, np.asarray(series["soc_pct"], float))
            true_soc = np.asarray(truth["soc"]["soc_pct"], float)[inside]
            sc.soc_max_err = float(np.max(np.abs(est - true_soc)))
            if series.get("soc_pct_lo") is not None:
                lo = np.interp(t_true[inside], t_ours, np.asarray(series["soc_pct_lo"], float))
                hi = np.interp(t_true[inside], t_ours, np.asarray(series["soc_pct_hi"], float))
                sc.soc_in_band = float(np.mean((true_soc >= lo - 0.5) & (true_soc <= hi + 0.5)))
                sc.soc_band_half = float(np.median(hi - lo) / 2)
    return sc


def declared_curve(name: str, seed: int, days: int | None) -> list[list[float]] | None:
    """The case's bank rested-voltage curve at 0, 5, ..., 100 % of its usable capacity, as its
    maker's datasheet would give it (``[battery] rest_voltage_curve``); None for a bank without one."""
    from independent.family import CASES

    bank = CASES[name].build(seed, None, days).make_bank()
    if not hasattr(bank, "ocv_at_soc_pct") or getattr(bank, "chemistry", None) != "lifepo4":
        return None  # the key is for LiFePO4 banks so far (docs/ocv.md#your-banks-own-curve)
    socs = np.arange(0.0, 101.0, 5.0)
    out: list[list[float]] = []
    for s_, v in zip(socs, bank.ocv_at_soc_pct(socs)):
        if not out or round(float(v), 4) > out[-1][1]:  # a datasheet curve rises: drop a point that does not
            out.append([float(s_), round(float(v), 4)])
    return out


def with_curve(system_text: str, curve: list[list[float]]) -> str:
    """``system_text`` with ``rest_voltage_curve`` added to its [battery] table."""
    line = "rest_voltage_curve = [" + ", ".join(f"[{s_:g}, {v:g}]" for s_, v in curve) + "]"
    out, done = [], False
    for row in system_text.splitlines():
        out.append(row)
        if row.strip() == "[battery]" and not done:
            out.append(line)
            done = True
    if not done:
        raise ValueError("system.toml has no [battery] table")
    return "\n".join(out) + "\n"


def run_case(name: str, seed: int, days: int | None, tmp: Path, verbose: bool,
             declare_curve: bool = False) -> list[Score]:
    from independent.family import make_case

    case = make_case(name, seed=seed, days=days, out_dir=tmp / f"{name}-{seed}")
    truth = case.truth if isinstance(case.truth, dict) else json.loads(Path(case.truth_json).read_text())
    system_text = Path(case.system_toml).read_text()
    if declare_curve:
        curve = declared_curve(name, seed, days)
        if curve is not None:
            system_text = with_curve(system_text, curve)
    out = []
    for layout, csv in (("multi", case.multi_csv), ("single", case.single_csv)):
        if csv is None:
            continue
        rep = analyse(Path(csv), system_text, tmp)
        s = score(name, seed, layout, rep, truth)
        out.append(s)
        if verbose:
            errs = " ".join(f"{100 * e:+.0f}" for e in s.consumed_err)
            cap = "null" if s.cap_err is None else f"{100 * s.cap_err:+.1f} %{'' if s.cap_in_ci else ' (CI misses)'}"
            print(f"  {name:18s} seed {seed} {layout:6s} consumed % [{errs}]  capacity {cap}  "
                  f"SoC max err {s.soc_max_err if s.soc_max_err is None else round(s.soc_max_err, 1)}  "
                  f"in band {'-' if s.soc_in_band is None else f'{100 * s.soc_in_band:.0f} %'}  "
                  f"undeclared {s.undeclared_Ah:.1f} Ah", flush=True)
    return out


def summarise(scores: list[Score]) -> list[str]:
    lines = []
    multi = [s for s in scores if s.layout == "multi"]
    single = [s for s in scores if s.layout == "single"]
    if multi:
        e = np.abs(np.concatenate([s.consumed_err for s in multi if s.consumed_err] or [np.zeros(0)]))
        lines.append(f"multi-channel consumed within +-2 %: {(e <= MULTI_TOL).sum()}/{len(e)} days, "
                     f"worst {100 * e.max() if len(e) else 0:.1f} %")
        cov = np.concatenate([s.covered for s in multi if s.covered] or [np.zeros(0, bool)])
        hw = np.concatenate([s.half_width for s in multi if s.half_width] or [np.zeros(0)])
        lines.append(f"multi-channel 95 % instrument range holds the truth: {cov.sum()}/{len(cov)} days, "
                     f"median half-width {100 * np.median(hw) if len(hw) else 0:.1f} %")
    if single:
        e = np.concatenate([s.consumed_err for s in single if s.consumed_err] or [np.zeros(0)])
        cov = np.concatenate([s.covered for s in single if s.covered] or [np.zeros(0, bool)])
        hw = np.concatenate([s.half_width for s in single if s.half_width] or [np.zeros(0)])
        hid = np.concatenate([s.hidden_h for s in single if s.hidden_h] or [np.zeros(0)])
        seen = hid < 1.0
        off = np.abs(e) > SINGLE_TOL
        lines.append(f"single-shunt 95 % interval holds the truth: {cov.sum()}/{len(cov)} days "
                     f"({100 * cov.mean() if len(cov) else 0:.0f} %), "
                     f"median half-width {100 * np.median(hw) if len(hw) else 0:.0f} %")
        lines.append(f"single-shunt within +-8 %: {(~off).sum()}/{len(e)} days; days with < 1 h not seen: "
                     f"{(~off & seen).sum()}/{seen.sum()} within 8 %; days > 8 % off without >= 1 h not seen: "
                     f"{(off & seen).sum()}")
        sol = np.abs(np.concatenate([s.solar_err for s in single if s.solar_err] or [np.zeros(0)]))
        lines.append(f"single-shunt solar within +-15 %: {(sol <= 0.15).sum()}/{len(sol)} days")
    for layout in ("multi", "single"):
        group = [s for s in scores if s.layout == layout]
        if not group:
            continue
        for chem in sorted({s.chemistry for s in group}):
            g = [s for s in group if s.chemistry == chem]
            tol = LEAD_SINGLE_CAP_TOL if (layout == "single" and chem != "lifepo4") else CAP_TOL[layout]
            known = [s for s in g if s.cap_err is not None]
            ok = [s for s in known if abs(s.cap_err) <= tol and s.cap_in_ci]
            worst = max((abs(s.cap_err) for s in known), default=0.0)
            ci_miss = sum(not s.cap_in_ci for s in known)
            lines.append(f"capacity {layout:6s} {chem:8s}: {len(ok)}/{len(known)} within +-{100 * tol:.0f} % with the "
                         f"interval holding the truth (worst {100 * worst:.1f} %, interval misses {ci_miss}); "
                         f"null with a reason on {len(g) - len(known)}/{len(g)}")
    soc = [s.soc_max_err for s in scores if s.soc_max_err is not None]
    if soc:
        lines.append(f"SoC series within {SOC_TOL_PTS:.0f} points of the truth at all times: "
                     f"{sum(x <= SOC_TOL_PTS for x in soc)}/{len(soc)} logs (worst {max(soc):.1f} points)")
    band = [s for s in scores if s.soc_in_band is not None]
    if band:
        share = np.array([s.soc_in_band for s in band])
        lines.append(f"SoC 95 % band holds the truth: {100 * share.mean():.0f} % of points over {len(band)} logs "
                     f"(>= 95 % of points on {(share >= 0.95).sum()} logs; worst log {100 * share.min():.0f} %), "
                     f"median half-width {np.median([s.soc_band_half for s in band]):.1f} points")
    lines.append(f"Ah booked to undeclared sources: {sum(s.undeclared_Ah for s in scores):.1f}")
    return lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--half", choices=("tune", "report", "all"), default="report")
    ap.add_argument("--cases", nargs="*", default=None, help="case names (default: every case)")
    ap.add_argument("--seeds", nargs="*", type=int, default=None, help="seeds (overrides --half)")
    ap.add_argument("--days", type=int, default=None, help="days per log (default: each case's own)")
    ap.add_argument("-q", "--quiet", action="store_true", help="only the summary")
    ap.add_argument("--dump", type=Path, default=None, help="write one CSV row per scored day here")
    ap.add_argument("--no-pybamm", action="store_true", help="leave out the (slow) PyBaMM cases")
    ap.add_argument("--declare-curve", action="store_true",
                    help="give each bank's own rested-voltage curve in system.toml (as its datasheet would)")
    args = ap.parse_args(argv)
    from independent import family

    seeds = args.seeds or {"tune": list(family.SEEDS_TUNE), "report": list(family.SEEDS_REPORT),
                           "all": list(family.SEEDS_TUNE) + list(family.SEEDS_REPORT)}[args.half]
    names = args.cases or [n for n in family.CASES if not (args.no_pybamm and n.startswith("pybamm"))]
    t0 = time.perf_counter()
    scores: list[Score] = []
    with tempfile.TemporaryDirectory() as tmp:
        for name in names:
            for seed in seeds:
                try:
                    scores += run_case(name, seed, args.days, Path(tmp), not args.quiet, args.declare_curve)
                except Exception as exc:  # noqa: BLE001 - one failing case is reported, not fatal
                    print(f"  {name} seed {seed}: FAILED {type(exc).__name__}: {exc}", flush=True)
    print(f"\n{len(scores)} logs ({', '.join(names)}; seeds {seeds}) in {time.perf_counter() - t0:.0f} s")
    print("\n".join(summarise(scores)))
    if args.dump:
        pd.DataFrame([r for s in scores for r in s.rows]).to_csv(args.dump, index=False)
        print(f"per-day rows: {args.dump}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
