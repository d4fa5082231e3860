"""``drawdown demo [--no-serve] [--scenario NAME | --fleet N] [--days N] [--host H] [--port P] [--json]``

Simulate a bundled scenario (default: ``autumn-van``) into a ``demo`` folder
beside the store, write its system description beside the store if there is
none, import the log, print a summary, and serve the dashboard unless
``--no-serve``. With ``--json`` the summary is one JSON object on stdout: the scenario, the
files written, the import's counts, and the report (the same keys as ``report --json``) or,
when the analysis cannot run, the simulation's truth summary.

Idempotent: the simulation uses the scenario's fixed seed, so the log is
byte-identical every time and the importer's sha256 check stores it only once.

With ``--fleet N``: simulate N invented vehicles (``drawdown simulate --fleet``, :data:`FLEET_DAYS`
days at :data:`FLEET_INTERVAL_S` s unless ``--days``) into ``demo/fleet-<N>x<D>d/`` beside the store,
ingest them into the fleet dataset ``demo/fleet-<N>x<D>d-dataset/`` (as ``drawdown fleet ingest``)
and serve the dashboard with its Fleet page (as ``drawdown serve --dataset``). Run again, it
simulates nothing (the fleet's files are there), ingests nothing new and reads the fleet report
from its cache.
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from drawdown.dashboard import labels
from drawdown.cli.context import Context, UsageError
from drawdown.cli.progress import stages


NAME = "demo"
HELP = "simulate the bundled scenario, import, analyse, serve the dashboard"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--no-serve", action="store_true", help="print the summary and stop")
    s.add_argument("--scenario", default=None, help="bundled scenario name (default: the first)")
    s.add_argument("--fleet", type=int, default=None, metavar="N",
                   help="instead: simulate N invented vehicles into a fleet dataset and serve its Fleet page")
    s.add_argument("--days", type=int, default=None, help="days to simulate (default: the scenario's)")
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--json", action="store_true", help="print the summary as one JSON object")


def _fmt(x: Any, spec: str = ".0f", unit: str = "") -> str:
    if x is None:
        return "n/a"
    try:
        return f"{float(x):{spec}}{unit}"
    except (TypeError, ValueError):
        return str(x)


def _truth_figures(truth: dict) -> dict[str, Any]:
    """The simulation's own figures (its truth file), for when the analysis cannot run."""
    days = truth["days"]
    n = len(days)
    b = truth["battery"]
    return {
        "days": n,
        "mean_consumed_Ah": sum(d["consumed_Ah"] for d in days) / n,
        "mean_consumed_Wh": sum(d["consumed_Wh"] for d in days) / n,
        "charged_Ah": {s: sum(d["charged_Ah"][s] for d in days) for s in ("solar", "alternator", "shore")},
        "usable_Ah": b["usable_Ah"], "rated_Ah": b["rated_Ah"], "state_of_health_pct": b["state_of_health_pct"],
        "lowest_soc_pct": min(d["soc_min_pct"] for d in days),
        "clear_days": sum(1 for s in truth["solar"]["days"] if s["sky"] == "clear"),
        "solar_derate": truth["solar"]["derate"], "full_charges": len(truth["full_charges"]),
    }


def _summary_from_truth(truth: dict) -> list[str]:
    f = _truth_figures(truth)
    total = sum(f["charged_Ah"].values()) or 1.0
    return [
        f"  {labels.plural(f['days'], 'day')}; mean use {f['mean_consumed_Ah']:.0f} Ah/day "
        f"({f['mean_consumed_Wh']:.0f} Wh/day)",
        "  charge by source: " + ", ".join(f"{s} {v:.0f} Ah ({100 * v / total:.0f} %)"
                                           for s, v in f["charged_Ah"].items()),
        f"  battery: {f['usable_Ah']:.0f} Ah usable of {f['rated_Ah']:g} Ah rated "
        f"(state of health {f['state_of_health_pct']:.0f} %), lowest state of charge {f['lowest_soc_pct']:.0f} %",
        f"  solar: {labels.plural(f['clear_days'], 'clear day')}, system derate {f['solar_derate']:g}; "
        f"bank full {labels.plural(f['full_charges'], 'time')}",
    ]


def _summary_from_report(report: dict) -> list[str]:
    """A few lines from the report's JSON form (the same keys ``report --json`` prints)."""
    days = report.get("days") or []
    bat = report.get("battery") or {}
    sol = report.get("solar") or {}
    lines = []
    if days:
        used = [d.get("consumed_Ah") for d in days if d.get("consumed_Ah") is not None]
        if used:
            lines.append(f"  {len(days)} days; mean use {sum(used) / len(used):.0f} Ah/day")
        src: dict[str, float] = {}
        for d in days:
            for k, v in (d.get("charged_Ah") or {}).items():
                src[k] = src.get(k, 0.0) + (v or 0.0)
        if src:
            lines.append("  charge by source: " + ", ".join(f"{k} {v:.0f} Ah" for k, v in src.items() if v))
    if bat.get("usable_Ah") is None:  # say 'unknown' and why, never 'n/a'
        lines.append(f"  battery: {_fmt(bat.get('rated_Ah'), 'g', ' Ah')} rated; usable capacity and state of "
                     "health unknown" + (f": {labels.for_people(bat['usable_Ah_why'])}" if bat.get("usable_Ah_why")
                                         else ""))
    else:
        lines.append(f"  battery: usable {_fmt(bat.get('usable_Ah'), '.0f', ' Ah')} of "
                     f"{_fmt(bat.get('rated_Ah'), 'g', ' Ah')} rated, state of health "
                     f"{_fmt(bat.get('state_of_health_pct'), '.0f', ' %')}")
    lines.append(f"  solar performance ratio {_fmt(sol.get('performance_ratio'), '.2f')}")
    return lines


#: ``demo --fleet``: days simulated per vehicle (unless ``--days``) and the sample interval [s]: a
#: small fleet that simulates and analyses in well under a minute on two cores.
FLEET_DAYS = 14
FLEET_INTERVAL_S = 60.0


def _run_fleet(args: Any, ctx: Context) -> int:
    """``demo --fleet N``: simulate, ingest, serve with the Fleet page (module docstring)."""
    from drawdown.cli.context import print_json
    from drawdown.cli.progress import bar
    from drawdown.collector import fleet_dataset
    from drawdown.collector.sim_fleet import DEFAULT_SEED, write_fleet

    n = int(args.fleet)
    if args.scenario:
        raise UsageError("--fleet invents vehicles of its own; leave out --scenario")
    if n < 1:
        raise UsageError(f"--fleet must be at least 1 vehicle, got {n}")
    if args.days is not None and args.days < 1:
        raise UsageError(f"--days must be at least 1, got {args.days}")
    days = int(args.days or FLEET_DAYS)
    base = ctx.store_path.parent / "demo"
    sim = base / f"fleet-{n}x{days}d"
    dataset = base / f"fleet-{n}x{days}d-dataset"
    try:
        manifest = json.loads((sim / fleet_dataset.MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        manifest = None
    same = (isinstance(manifest, dict) and manifest.get("days") == days and manifest.get("seed") == DEFAULT_SEED
            and manifest.get("interval_s") == FLEET_INTERVAL_S and len(manifest.get("vehicles") or []) == n)
    if same:
        print(f"fleet: {sim} already holds these {n} vehicles x {days} days; not simulated again", file=sys.stderr)
    else:
        print(f"simulating {labels.plural(n, 'vehicle')} x {days} days, a reading every {FLEET_INTERVAL_S:g} s, "
              f"into {sim} ...", file=sys.stderr)
        try:
            with bar(n, "simulating vehicles", unit="vehicle") as b:
                write_fleet(sim, n, days, seed=DEFAULT_SEED, interval_s=FLEET_INTERVAL_S,
                            progress=lambda _r: b.update(1))
        except OSError as exc:
            raise UsageError(f"cannot write the demo fleet into {sim} ({exc.strerror or exc})") from None
    result = fleet_dataset.ingest([sim], dataset)
    ok = [r for r in result.sources if r.error is None]
    for r in result.sources:
        if r.error is not None:
            print(f"fleet ingest: {r.source}: not ingested: {r.error}", file=sys.stderr)
    if not ok:
        raise UsageError(f"no vehicle of {sim} could be ingested into {dataset}")
    added = sum(r.rows_added for r in ok)
    summary = {"fleet": n, "days": days, "interval_s": FLEET_INTERVAL_S, "simulated": str(sim),
               "dataset": str(dataset), "vehicles": sorted({str(r.vehicle) for r in ok}),
               "rows_added": added, "failed": len(result.sources) - len(ok), "serving": not args.no_serve}
    if getattr(args, "json", False):
        print_json(summary)
        sys.stdout.flush()
    else:
        print(f"drawdown demo: a fleet of {labels.plural(len(ok), 'invented vehicle')} x {days} days in the "
              f"dataset {dataset} ({added:,} readings added)")
        print(f"  the same on its own: drawdown fleet report --dataset {dataset}")
        sys.stdout.flush()
    if args.no_serve:
        return 0
    from types import SimpleNamespace

    from drawdown.cli.commands.serve import fleet_source
    from drawdown.dashboard.app import serve

    fleet = fleet_source(SimpleNamespace(dataset=str(dataset), cache=None, workers=None, scheduler=None,
                                         memory_limit=None), ctx)
    return int(serve(ctx, args.host, args.port, fleet=fleet) or 0)


def run(args: Any, ctx: Context) -> int:
    import pandas as pd

    if getattr(args, "fleet", None) is not None:
        return _run_fleet(args, ctx)

    from drawdown.analysis.report import REPORT_STEPS, build_report
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.simulated import (DEFAULT_SCENARIO, UnknownScenarioError, available_scenarios,
                                     load_scenario, simulate, write_log)

    name = args.scenario or (DEFAULT_SCENARIO if DEFAULT_SCENARIO in available_scenarios()
                             else available_scenarios()[0])
    try:
        scenario = load_scenario(name)
    except UnknownScenarioError as exc:
        raise UsageError(str(exc)) from None
    if args.days is not None and args.days < 1:
        raise UsageError(f"--days must be at least 1, got {args.days}")

    folder = ctx.store_path.parent / "demo"
    folder.mkdir(parents=True, exist_ok=True)
    days = args.days or scenario.params.scenario.default_days
    out = folder / f"{scenario.name}-{days}d.csv"
    print(f"simulating {scenario.name} ({scenario.params.scenario.description}), {days} days ...", file=sys.stderr)
    with stages("simulating", ["simulating", "writing the log"]) as step:
        step("simulating")
        sim = simulate(scenario, days=days)  # the scenario's fixed seed: the same bytes every run
        step("writing the log")
        truth_path = write_log(sim, out)
    print(f"log: {out}\ntruth: {truth_path}", file=sys.stderr)

    if ctx.system_path.exists():
        print(f"system description: {ctx.system_path} exists, left as it is", file=sys.stderr)
    else:
        ctx.system_path.parent.mkdir(parents=True, exist_ok=True)
        ctx.system_path.write_text(scenario.system_text, encoding="utf-8")
        print(f"system description: wrote {ctx.system_path}", file=sys.stderr)
    system = ctx.load_system()

    with ctx.open_store() as store:
        result = import_file(out, store, tz=system.site.timezone,
                             nominal_voltage_V=system.battery.nominal_voltage_V)
    if result.already_imported:
        print("import: already in the store (same content), nothing added", file=sys.stderr)
    else:
        print(f"import: {result.rows_stored} rows stored, {result.rows_rejected} rejected", file=sys.stderr)

    tz = system.site.timezone  # a person reads local time with its zone
    as_json = bool(getattr(args, "json", False))
    if not as_json:
        print(f"drawdown demo: {scenario.name}, {labels.local_time(sim.truth['start'], tz)} .. "
              f"{labels.local_time(sim.truth['end'], tz)}")
    report = None
    try:
        with ctx.open_store() as store:
            readings = store.read(sim.truth["start"], sim.truth["end"])
            rejected = sum(int(i.get("rows_rejected") or 0) for i in store.imports())
        with stages("analysing", list(REPORT_STEPS)) as step:
            report = build_report(readings, system, rows_rejected=rejected, progress=step,
                                  start=pd.Timestamp(sim.truth["start"]), end=pd.Timestamp(sim.truth["end"]))
    except ValueError as exc:  # nothing analysable stored: show the truth, and say why
        print(f"the analysis could not run ({exc}); showing the simulation's truth", file=sys.stderr)
    report_json = None if report is None else json.loads(json.dumps(report.to_json(), default=str))
    if as_json:
        out_json: dict[str, Any] = {
            "scenario": scenario.name, "start": sim.truth["start"], "end": sim.truth["end"], "days": days,
            "log": str(out), "truth": str(truth_path), "system": str(ctx.system_path),
            "store": str(ctx.store_path),
            "import": {"already_imported": result.already_imported, "rows_stored": result.rows_stored,
                       "rows_rejected": result.rows_rejected},
            "report": report_json,
            "truth_summary": None if report is not None else _truth_figures(sim.truth),
            "serving": not args.no_serve,
        }
        print(json.dumps(out_json, indent=2), flush=True)
    else:
        if report_json is not None:
            print("analysis of the stored log:")
            lines = _summary_from_report(report_json)
        else:
            print("what the simulation did (its truth file):")
            lines = _summary_from_truth(sim.truth)
        for line in lines:
            print(line)
        sys.stdout.flush()

    if args.no_serve:
        return 0
    from drawdown.dashboard.app import serve  # the web stack loads only when serving

    return int(serve(ctx, args.host, args.port) or 0)
