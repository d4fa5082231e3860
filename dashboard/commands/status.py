"""``drawdown status [--json]``: what the store holds, per channel its rows, first and last time.

It also checks the system description when there is one: a ``system.toml`` that
does not validate (a typo, a renamed key) is reported here with its key and the
command exits 2, rather than the first analysis failing later.
"""

from __future__ import annotations

from typing import Any

from dashboard.context import Context, print_json


def status_dict(ctx: Context) -> dict[str, Any]:
    """The status object (DESIGN.md ``status`` keys plus import totals); never creates a store."""
    out: dict[str, Any] = {"store": str(ctx.store_path), "exists": ctx.store_path.exists(), "channels": {},
                           "imports": 0, "rows_stored": 0, "rows_rejected": 0, "quarantine": None,
                           "system": None}
    if ctx.has_system():
        ctx.load_system()  # UsageError (exit 2) naming the file and the key when it does not validate
        out["system"] = str(ctx.system_path)
    if not out["exists"]:
        return out
    store = ctx.open_store()
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
    print(f"system: {st['system']} (valid)" if st["system"] else
          f"system: {ctx.system_path} (not written yet; see README 'Describe your system')")
    chans = st["channels"]
    if not chans:
        print("no readings stored yet; try 'drawdown import FILE' or 'drawdown demo'")
        return 0
    width = max(7, *(len(c) for c in chans))
    print(f"{'channel':<{width}}  {'rows':>12}  {'first (UTC)':<25}  {'last (UTC)':<25}")
    for name, info in chans.items():
        print(f"{name:<{width}}  {info['rows']:>12,}  {info['first']:<25}  {info['last']:<25}")
    print(f"{st['imports']} file(s) imported: {st['rows_stored']:,} data lines stored, "
          f"{st['rows_rejected']:,} rejected" + (f" (see {st['quarantine']})" if st["quarantine"] else ""))
    return 0
