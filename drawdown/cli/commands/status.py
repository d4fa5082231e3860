"""``drawdown status [--json]``: what the store holds, per channel its rows, first and last time.

It only reads: the store is opened read-only, so it works on a read-only file system or
another user's file, and it says in plain words when the store is read-only or its disk is
full (``writable``, ``disk_free_bytes``), since imports and the collector then cannot write.

It also checks the system description when there is one: a ``system.toml`` that
does not validate (a typo, a renamed key) is reported here with its key and the
command exits 2, rather than the first analysis failing later.
"""

from __future__ import annotations

import argparse
import os
import shutil
from pathlib import Path
from typing import Any

from drawdown.cli.context import Context, print_json
from drawdown.dashboard.labels import local_time, plural

NAME = "status"
HELP = "what the store holds"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--json", action="store_true")


#: Less free space than this on the store's disk [bytes] is "full": an import or the collector's
#: next commit cannot be written.
DISK_FULL_BYTES = 1 << 20


def _writable(path: Path) -> bool:
    """True when the store (and its folder, for the WAL files) can be written by this user."""
    folder = path.parent if str(path.parent) else Path(".")
    return os.access(path, os.W_OK) and os.access(folder, os.W_OK)


def _free_bytes(path: Path) -> int | None:
    try:
        return int(shutil.disk_usage(path.parent if str(path.parent) else ".").free)
    except OSError:
        return None


def status_dict(ctx: Context) -> dict[str, Any]:
    """The status object (docs/contracts.md#status keys plus import totals); never creates a store."""
    out: dict[str, Any] = {"store": str(ctx.store_path), "exists": ctx.store_path.exists(), "channels": {},
                           "imports": 0, "rows_stored": 0, "rows_rejected": 0, "quarantine": None,
                           "system": None, "writable": None, "disk_free_bytes": None, "disk_full": None}
    if ctx.has_system():
        ctx.load_system()  # UsageError (exit 2) naming the file and the key when it does not validate
        out["system"] = str(ctx.system_path)
    if not out["exists"]:
        return out
    out["writable"] = _writable(ctx.store_path)
    out["disk_free_bytes"] = _free_bytes(ctx.store_path)
    out["disk_full"] = out["disk_free_bytes"] is not None and out["disk_free_bytes"] < DISK_FULL_BYTES
    store = ctx.open_store(read_only=True)  # never writes, not even the schema
    try:
        out["channels"] = store.channel_summary()
        imports = store.imports()
        out["imports"] = len(imports)
        out["rows_stored"] = sum(int(i["rows_stored"]) for i in imports)
        out["rows_rejected"] = sum(int(i["rows_rejected"]) for i in imports)
        if store.quarantine_dir.exists():
            out["quarantine"] = str(store.quarantine_dir)
    finally:
        store.close()
    return out


def run(args: Any, ctx: Context) -> int:
    st = status_dict(ctx)
    if args.json:
        print_json(st)
        return 0
    print(f"store: {st['store']}" + ("" if st["exists"] else " (not created yet: nothing imported)"))
    if st["exists"] and not st["writable"]:
        print("  read-only: this store can be read here but not written (a read-only file system or another "
              "user's file); 'drawdown import' and the collector cannot add to it")
    if st["disk_full"]:
        print(f"  disk full: {st['disk_free_bytes']:,} bytes free beside the store; 'drawdown import' and the "
              "collector cannot write until space is freed")
    print(f"system: {st['system']} (valid)" if st["system"] else
          f"system: {ctx.system_path} (not written yet; see README 'Describe your system')")
    chans = st["channels"]
    if not chans:
        print("no readings stored yet; try 'drawdown import FILE' or 'drawdown demo'")
        return 0
    # A person reads local time with its zone (the site's from system.toml, else UTC); --json stays UTC.
    tz = ctx.load_system().site.timezone if st["system"] else "UTC"
    width = max(7, *(len(c) for c in chans))
    print(f"times in {tz} local time" if tz != "UTC" else "times in UTC (no system.toml site timezone)")
    print(f"{'channel':<{width}}  {'rows':>12}  {'first':<24}  {'last':<24}")
    for name, info in chans.items():
        print(f"{name:<{width}}  {info['rows']:>12,}  {local_time(info['first'], tz, seconds=True):<24}  "
              f"{local_time(info['last'], tz, seconds=True):<24}")
    print(f"{plural(st['imports'], 'file')} imported: {st['rows_stored']:,} data lines stored, "
          f"{st['rows_rejected']:,} rejected" + (f" (see {st['quarantine']})" if st["quarantine"] else ""))
    return 0
