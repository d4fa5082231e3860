"""Fuzz benchmark: mutated logs through the importer, in-process and through the real command.

Each case starts from a small, well-formed log (a random delimiter, decimal mark, time form and
encoding) and applies one to four mutations: random bytes, truncation, NUL bytes, mixed
delimiters, mixed or re-chosen encodings, byte-order marks (right and wrong), huge lines, huge
numbers, NaN / inf, dates anywhere from 1900 to 9999, duplicated and reversed times, repeated
headers, blank lines, CR line ends, and now and then a line of 10^6 columns.

In-process (``collector.csv_file.import_file`` into a real SQLite store), every case must end as
either an :class:`ImportResult` or an :class:`UnusableInput` refusal (exit 2 in the command);
any other exception is what the command would report as exit 1 (an internal error), and a case
that runs past the per-file timeout is a hang. For every stored file it checks:

* ``rows_stored + rows_rejected == data_lines``;
* the quarantine file holds exactly ``rows_rejected`` lines;
* the store grew by exactly ``rows_added`` readings (``SUM(n)`` of the chunks) for a one-channel
  log, by between one and as many as it has channels per added line for a multi-channel one;

and ``PRAGMA integrity_check`` is ``ok`` on every store (a fresh store every 500 cases).

Through the command (``drawdown --store S import --json FILE`` in a subprocess with a timeout),
every exit must be 0 or 2, with no traceback on stderr, and the JSON printed must obey the same
count.

Usage::

    python benchmarks/import_fuzz.py --quick     # ~5,000 in-process + 60 by command, a few minutes
    python benchmarks/import_fuzz.py             # 100,000 in-process + 500 by command (longer)
    python benchmarks/import_fuzz.py --json      # the figures as one JSON object

Exit status 0 when every figure is as required, 1 otherwise (the failing cases are kept in the
work folder, which is then printed).
"""

from __future__ import annotations

import argparse
import codecs
import csv
import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
import traceback
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from drawdown.collector.csv_file import UnusableInput, import_file  # noqa: E402
from drawdown.collector.store import Store  # noqa: E402

STORE_EVERY = 500  # cases per store (then a fresh one: integrity checked, counts stay small)


# -- generating cases --------------------------------------------------------------------------

def _base_log(rng: random.Random) -> tuple[list[str], str, str]:
    """(lines without line ends, delimiter, decimal mark) of a small well-formed log."""
    delim = rng.choice([",", ";", "\t", "|"])
    decimal = "," if delim != "," and rng.random() < 0.4 else "."
    kind = rng.choice(["iso_z", "iso_offset", "local", "local_dmy", "epoch_s", "epoch_ms", "date_clock"])
    header = {"iso_z": ["time"], "iso_offset": ["timestamp"], "local": ["time"], "local_dmy": ["Date/Time"],
              "epoch_s": ["epoch_s"], "epoch_ms": ["epoch_ms"], "date_clock": ["date", "clock"]}[kind]
    quantities = rng.choice([["voltage_V", "current_A"], ["Voltage (V)", "Current (A)", "SOC (%)"],
                             ["battery_voltage_V", "battery_current_A", "solar_current_A"],
                             ["V", "I", "T"], ["current_A"], ["voltage_V", "current_mA", "temperature_C"]])
    lines = [delim.join(header + quantities)]
    n = rng.choice([1, 2, 3, 5, 10, 30, 60, 200])
    t0 = rng.randrange(1_500_000_000, 1_780_000_000)
    step = rng.choice([1, 2, 10, 60])
    for i in range(n):
        t = t0 + i * step
        tm = time.gmtime(t)
        if kind == "iso_z":
            ts = [time.strftime("%Y-%m-%dT%H:%M:%SZ", tm)]
        elif kind == "iso_offset":
            ts = [time.strftime("%Y-%m-%dT%H:%M:%S", tm) + rng.choice(["+02:00", "-05:00", "+0000"])]
        elif kind == "local":
            ts = [time.strftime("%Y-%m-%d %H:%M:%S", tm)]
        elif kind == "local_dmy":
            ts = [time.strftime("%d.%m.%Y %H:%M:%S", tm)]
        elif kind == "epoch_s":
            ts = [str(t)]
        elif kind == "epoch_ms":
            ts = [str(t * 1000)]
        else:
            ts = [time.strftime("%Y-%m-%d", tm), time.strftime("%H:%M:%S", tm)]
        vals = []
        for q in quantities:
            ql = q.lower()
            if "volt" in ql or ql == "v":
                x = 12.0 + rng.random() * 2.5
            elif "soc" in ql:
                x = rng.random() * 100
            elif "temp" in ql or ql == "t":
                x = rng.uniform(-10, 40)
            elif "ma" in ql:
                x = rng.uniform(-20000, 20000)
            else:
                x = rng.uniform(-40, 40)
            vals.append(f"{x:.3f}".replace(".", decimal))
        lines.append(delim.join(ts + vals))
    return lines, delim, decimal


def _random_year_date(rng: random.Random) -> str:
    y = rng.choice([1900, 1901, 1969, 1970, 1979, 1980, 1986, 1999, 2000, 2038, 2100, 2999, 9999,
                    rng.randrange(1900, 10000)])
    return f"{y:04d}-{rng.randrange(1, 13):02d}-{rng.randrange(1, 29):02d}T{rng.randrange(24):02d}:" \
           f"{rng.randrange(60):02d}:{rng.randrange(60):02d}Z"


def _mutate_lines(lines: list[str], delim: str, rng: random.Random, name: str) -> list[str]:
    body = lines[1:]
    if name == "duplicate_times" and body:
        for _ in range(rng.randrange(1, 5)):
            i = rng.randrange(len(body))
            body.insert(i, body[i] if rng.random() < 0.5 else body[i].rsplit(delim, 1)[0] + delim + "99")
    elif name == "reverse_times":
        body.reverse()
    elif name == "shuffle_times":
        rng.shuffle(body)
    elif name == "dates_1900_9999" and body:
        for _ in range(rng.randrange(1, len(body) + 1)):
            i = rng.randrange(len(body))
            parts = body[i].split(delim)
            parts[0] = _random_year_date(rng)
            body[i] = delim.join(parts)
    elif name == "nan_inf" and body:
        for _ in range(rng.randrange(1, 6)):
            i = rng.randrange(len(body))
            parts = body[i].split(delim)
            j = rng.randrange(len(parts))
            parts[j] = rng.choice(["nan", "NaN", "inf", "-inf", "Infinity", "-Infinity", "NAN", "1e999", ""])
            body[i] = delim.join(parts)
    elif name == "huge_numbers" and body:
        for _ in range(rng.randrange(1, 4)):
            i = rng.randrange(len(body))
            parts = body[i].split(delim)
            j = rng.randrange(len(parts))
            parts[j] = rng.choice(["9" * rng.randrange(20, 5000), "1e308", "-1.7976931348623157e308",
                                   "1e-400", "0x1F", "12" + "0" * 400 + ".5", "99999999999999999999"])
            body[i] = delim.join(parts)
    elif name == "mixed_delimiters" and body:
        other = rng.choice([d for d in (",", ";", "\t", "|", " ") if d != delim])
        for _ in range(rng.randrange(1, len(body) + 1)):
            i = rng.randrange(len(body))
            body[i] = body[i].replace(delim, other, rng.randrange(1, 4))
    elif name == "repeated_header" and body:
        for _ in range(rng.randrange(1, 4)):
            body.insert(rng.randrange(len(body) + 1), lines[0])
    elif name == "blank_lines":
        for _ in range(rng.randrange(1, 6)):
            body.insert(rng.randrange(len(body) + 1), rng.choice(["", " ", "\t", delim * 3]))
    elif name == "huge_line":
        body.insert(rng.randrange(len(body) + 1), rng.choice(["x", "1", "9,", "é"]) * rng.randrange(10_000, 400_000))
    elif name == "million_columns":
        body.insert(rng.randrange(len(body) + 1), delim.join(["1"] * 1_000_000))
    elif name == "extra_fields" and body:
        i = rng.randrange(len(body))
        body[i] = body[i] + delim + "surplus"
    elif name == "preamble":
        return [rng.choice(["Device: logger", "# exported", "Serial;1234", ""]) for _ in range(rng.randrange(1, 5))] \
            + [lines[0]] + body
    return [lines[0]] + body


LINE_MUTATIONS = ["duplicate_times", "reverse_times", "shuffle_times", "dates_1900_9999", "nan_inf", "huge_numbers",
                  "mixed_delimiters", "repeated_header", "blank_lines", "extra_fields", "preamble"]
BYTE_MUTATIONS = ["random_bytes", "truncate", "nul", "bom", "wrong_bom", "mixed_encoding", "all_random"]


def _encode(lines: list[str], rng: random.Random) -> tuple[bytes, str]:
    end = rng.choice(["\n", "\n", "\r\n", "\r"])
    text = end.join(lines) + (end if rng.random() < 0.9 else "")
    enc = rng.choice(["utf-8", "utf-8", "utf-8", "utf-8-sig", "latin-1", "utf-16", "utf-16-le", "utf-16-be", "cp1252"])
    return text.encode(enc, errors="replace"), enc


def _mutate_bytes(data: bytes, rng: random.Random, name: str) -> bytes:
    if name == "random_bytes" and data:
        b = bytearray(data)
        for _ in range(rng.randrange(1, 20)):
            i = rng.randrange(len(b))
            b[i:i + rng.randrange(1, 8)] = os.urandom(rng.randrange(1, 8))
        return bytes(b)
    if name == "truncate" and data:
        return data[: rng.randrange(len(data))]
    if name == "nul" and data:
        i = rng.randrange(len(data))
        return data[:i] + b"\x00" * rng.choice([1, 2, 7, 64, 4096]) + data[i:]
    if name == "bom":
        return rng.choice([codecs.BOM_UTF8, codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE, codecs.BOM_UTF32_LE]) + data
    if name == "wrong_bom":
        return rng.choice([codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE, codecs.BOM_UTF8 * 2]) + data
    if name == "mixed_encoding" and data:
        i = rng.randrange(len(data))
        tail = data[i:].decode("utf-8", errors="replace")
        return data[:i] + tail.encode(rng.choice(["utf-16-le", "latin-1", "utf-16-be"]), errors="replace")
    if name == "all_random":
        return os.urandom(rng.choice([0, 1, 2, 3, 17, 512, 4096, 65536]))
    return data


def make_case(rng: random.Random, *, allow_million: bool) -> tuple[bytes, list[str]]:
    lines, delim, _decimal = _base_log(rng)
    applied: list[str] = []
    for _ in range(rng.randrange(1, 5)):
        r = rng.random()
        if allow_million and r < 0.0005:
            name = "million_columns"
        elif r < 0.01:
            name = "huge_line"
        elif r < 0.6:
            name = rng.choice(LINE_MUTATIONS)
        else:
            name = None
        if name is not None:
            lines = _mutate_lines(lines, delim, rng, name)
            applied.append(name)
    data, enc = _encode(lines, rng)
    applied.append(f"encoding={enc}")
    if rng.random() < 0.5:
        name = rng.choice(BYTE_MUTATIONS)
        data = _mutate_bytes(data, rng, name)
        applied.append(name)
    return data, applied


# -- running cases -----------------------------------------------------------------------------

class Hang(Exception):
    pass


def _alarm(_signum, _frame):
    raise Hang()


def _quarantine_lines(path: str | None) -> int:
    if not path or not Path(path).exists():
        return 0
    with open(path, newline="", encoding="utf-8") as f:
        return max(sum(1 for _ in csv.reader(f)) - 1, 0)


def _written(store: Store) -> int:
    return int(store.execute("SELECT COALESCE(SUM(n), 0) FROM chunks").fetchone()[0])


def _integrity(path: Path) -> str:
    with sqlite3.connect(path) as db:
        return db.execute("PRAGMA integrity_check").fetchone()[0]


def run_in_process(n: int, work: Path, rng: random.Random, timeout_s: float, failures: list[dict]) -> dict:
    counts = {"cases": 0, "stored": 0, "refused": 0, "crash": 0, "hang": 0, "count_mismatch": 0,
              "already_imported": 0, "integrity_checks": 0, "integrity_failed": 0, "data_lines": 0,
              "rows_stored": 0, "rows_rejected": 0, "million_column_cases": 0, "huge_line_cases": 0}
    signal.signal(signal.SIGALRM, _alarm)
    store = None
    store_path = None
    t0 = time.perf_counter()
    case_file = work / "case.csv"
    forced_million = {n // 3, (2 * n) // 3}  # at least two 10^6-column lines whatever the dice say
    for k in range(n):
        if k % STORE_EVERY == 0:
            if store is not None:
                store.close()
                counts["integrity_checks"] += 1
                if _integrity(store_path) != "ok":
                    counts["integrity_failed"] += 1
                    failures.append({"where": "in-process", "store": str(store_path), "what": "integrity"})
            store_path = work / f"store-{k // STORE_EVERY}" / "s.sqlite"
            store = Store(store_path)
        if k and k % 5000 == 0:  # a running tally, for a long run watched from outside
            print(f"  ... {k:,} in-process cases in {time.perf_counter() - t0:.0f} s: crash {counts['crash']}, "
                  f"hang {counts['hang']}, count mismatches {counts['count_mismatch']}, integrity failed "
                  f"{counts['integrity_failed']} of {counts['integrity_checks']}", file=sys.stderr, flush=True)
        data, applied = make_case(rng, allow_million=True)
        if k in forced_million:
            lines = data.split(b"\n")
            lines.insert(min(2, len(lines)), b",".join([b"1"] * 1_000_000))
            data = b"\n".join(lines)
            applied.append("million_columns")
        counts["million_column_cases"] += "million_columns" in applied
        counts["huge_line_cases"] += "huge_line" in applied
        case_file.write_bytes(data)
        before = _written(store)
        counts["cases"] += 1
        signal.setitimer(signal.ITIMER_REAL, timeout_s)
        try:
            r = import_file(case_file, store, tz=rng.choice([None, "Europe/Oslo", "America/Denver"]))
        except UnusableInput:
            signal.setitimer(signal.ITIMER_REAL, 0)
            counts["refused"] += 1
            if _written(store) != before:
                counts["count_mismatch"] += 1
                failures.append({"where": "in-process", "case": k, "what": "refused but wrote", "applied": applied})
            continue
        except Hang:
            counts["hang"] += 1
            keep = work / f"hang-{k}.csv"
            keep.write_bytes(data)
            failures.append({"where": "in-process", "case": k, "what": "hang", "file": str(keep), "applied": applied})
            continue
        except Exception as exc:  # noqa: BLE001 - exactly what the fuzz looks for
            signal.setitimer(signal.ITIMER_REAL, 0)
            counts["crash"] += 1
            keep = work / f"crash-{k}.csv"
            keep.write_bytes(data)
            failures.append({"where": "in-process", "case": k, "what": f"{type(exc).__name__}: {exc}"[:300],
                             "file": str(keep), "applied": applied,
                             "trace": traceback.format_exc().splitlines()[-6:]})
            # the store's transaction was rolled back; go on with it
            continue
        signal.setitimer(signal.ITIMER_REAL, 0)
        if r.already_imported:
            counts["already_imported"] += 1
            continue
        counts["stored"] += 1
        counts["data_lines"] += r.data_lines
        counts["rows_stored"] += r.rows_stored
        counts["rows_rejected"] += r.rows_rejected
        grew = _written(store) - before  # readings: one per channel a line has values for
        ok = (r.rows_stored + r.rows_rejected == r.data_lines
              and _quarantine_lines(r.quarantine) == r.rows_rejected
              and (grew == r.rows_added if len(r.channels) == 1
                   else r.rows_added <= grew <= r.rows_added * len(r.channels)))
        if not ok:
            counts["count_mismatch"] += 1
            keep = work / f"count-{k}.csv"
            keep.write_bytes(data)
            failures.append({"where": "in-process", "case": k, "what": "counts", "file": str(keep), "applied": applied,
                             "stored": r.rows_stored, "rejected": r.rows_rejected, "data_lines": r.data_lines,
                             "quarantined": _quarantine_lines(r.quarantine), "added": r.rows_added,
                             "written": _written(store) - before})
    if store is not None:
        store.close()
        counts["integrity_checks"] += 1
        if _integrity(store_path) != "ok":
            counts["integrity_failed"] += 1
    counts["seconds"] = round(time.perf_counter() - t0, 1)
    return counts


def _command() -> list[str]:
    entry = Path(sys.executable).with_name("drawdown")
    return [str(entry)] if entry.exists() else [sys.executable, "-m", "drawdown"]


def run_command(n: int, work: Path, rng: random.Random, timeout_s: float, failures: list[dict]) -> dict:
    counts = {"cases": 0, "exit_0": 0, "exit_2": 0, "exit_other": 0, "traceback": 0, "hang": 0,
              "count_mismatch": 0, "integrity_failed": 0}
    store_path = work / "cli" / "s.sqlite"
    env = {**os.environ, "PYBAMM_DISABLE_TELEMETRY": "true"}
    t0 = time.perf_counter()
    for k in range(n):
        data, applied = make_case(rng, allow_million=(k == n // 2))
        if k == n // 2 and "million_columns" not in applied:
            data = data + b"\n" + b";".join([b"2"] * 1_000_000) + b"\n"
            applied.append("million_columns")
        case = work / "cli" / f"case-{k}.csv"
        case.parent.mkdir(parents=True, exist_ok=True)
        case.write_bytes(data)
        counts["cases"] += 1
        try:
            p = subprocess.run([*_command(), "--store", str(store_path), "import", "--json", str(case)],
                               cwd=ROOT, env=env, capture_output=True, text=True, timeout=timeout_s)
        except subprocess.TimeoutExpired:
            counts["hang"] += 1
            failures.append({"where": "command", "case": k, "what": "hang", "file": str(case), "applied": applied})
            continue
        if p.returncode == 0:
            counts["exit_0"] += 1
        elif p.returncode == 2:
            counts["exit_2"] += 1
        else:
            counts["exit_other"] += 1
        bad = p.returncode not in (0, 2) or "Traceback" in p.stderr
        counts["traceback"] += "Traceback" in p.stderr
        if not bad:
            try:
                for f in json.loads(p.stdout)["files"]:
                    if f.get("usable") and not f.get("already_imported") and \
                            f["rows_stored"] + f["rows_rejected"] != f["data_lines"]:
                        counts["count_mismatch"] += 1
                        bad = True
            except (ValueError, KeyError) as exc:
                bad = True
                counts["count_mismatch"] += 1
                applied.append(f"unreadable JSON: {exc}")
        if bad:
            failures.append({"where": "command", "case": k, "exit": p.returncode, "file": str(case),
                             "applied": applied, "stderr": p.stderr[-800:]})
        else:
            case.unlink()
    if store_path.exists() and _integrity(store_path) != "ok":
        counts["integrity_failed"] += 1
    counts["seconds"] = round(time.perf_counter() - t0, 1)
    return counts


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="5,000 in-process and 60 command cases")
    ap.add_argument("--in-process", type=int, default=None, help="in-process cases (default 100,000)")
    ap.add_argument("--command", type=int, default=None, help="cases through `drawdown import` (default 500)")
    ap.add_argument("--seed", type=int, default=20240604)
    ap.add_argument("--timeout", type=float, default=60.0, help="per-file timeout [s] (a hang past it)")
    ap.add_argument("--work", type=Path, default=None, help="work folder (default: a temporary one)")
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args(argv)
    n_in = args.in_process if args.in_process is not None else (5_000 if args.quick else 100_000)
    n_cmd = args.command if args.command is not None else (60 if args.quick else 500)
    work = args.work or Path(tempfile.mkdtemp(prefix="drawdown-fuzz-"))
    work.mkdir(parents=True, exist_ok=True)
    failures: list[dict] = []
    rng = random.Random(args.seed)
    inproc = run_in_process(n_in, work, rng, args.timeout, failures)
    cmd = run_command(n_cmd, work, random.Random(args.seed + 1), args.timeout, failures)
    figures = {"in_process": inproc, "command": cmd, "seed": args.seed, "timeout_s": args.timeout,
               "failures": failures[:20], "failures_total": len(failures)}
    passed = (inproc["crash"] == 0 and inproc["hang"] == 0 and inproc["count_mismatch"] == 0
              and inproc["integrity_failed"] == 0 and cmd["exit_other"] == 0 and cmd["traceback"] == 0
              and cmd["hang"] == 0 and cmd["count_mismatch"] == 0 and cmd["integrity_failed"] == 0)
    figures["passed"] = passed
    if args.json:
        print(json.dumps(figures, indent=2))
    else:
        i, c = inproc, cmd
        print(f"in-process: {i['cases']:,} cases in {i['seconds']} s: {i['stored']:,} stored, {i['refused']:,} "
              f"refused (exit 2), {i['already_imported']:,} already imported; exit-1 (crash) {i['crash']}, "
              f"hangs {i['hang']}, count mismatches {i['count_mismatch']}")
        print(f"  data lines {i['data_lines']:,} = stored {i['rows_stored']:,} + rejected {i['rows_rejected']:,}"
              f" ({'holds' if i['data_lines'] == i['rows_stored'] + i['rows_rejected'] else 'DOES NOT HOLD'}); "
              f"10^6-column cases {i['million_column_cases']}, huge-line cases {i['huge_line_cases']}; "
              f"integrity_check ok on {i['integrity_checks'] - i['integrity_failed']} of {i['integrity_checks']} stores")
        print(f"command:    {c['cases']:,} cases in {c['seconds']} s: exit 0 {c['exit_0']}, exit 2 {c['exit_2']}, "
              f"other exits {c['exit_other']}, tracebacks {c['traceback']}, hangs {c['hang']}, "
              f"count mismatches {c['count_mismatch']}, integrity {'ok' if not c['integrity_failed'] else 'FAILED'}")
        for f in failures[:10]:
            print("  FAIL", json.dumps(f)[:600])
        print("PASS" if passed else f"FAIL (cases kept in {work})")
    return 0 if passed else 1


if __name__ == "__main__":
    sys.exit(main())
