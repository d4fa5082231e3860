"""``drawdown serve [--host H] [--port P] [--token T]``: the dashboard.

Bound to 127.0.0.1 by default. With ``--host`` other than a loopback address
the dashboard requires an access token on every request: ``--token`` or one
generated and printed on stderr at start.
"""

from __future__ import annotations

from typing import Any

from dashboard.context import Context, UsageError


def run(args: Any, ctx: Context) -> int:
    from dashboard.app import serve
    from dashboard.security import is_loopback

    token = getattr(args, "token", None)
    if token is not None and len(token) < 16:
        raise UsageError("--token must be at least 16 characters (omit it to have one generated)")
    if not (1 <= int(args.port) <= 65535):
        raise UsageError(f"--port {args.port}: expected a TCP port between 1 and 65535")
    if not ctx.store_path.exists():
        from dashboard.context import warn

        warn(f"drawdown serve: no store at {ctx.store_path} yet; the pages will say so until you import a log.")
    if not is_loopback(args.host) and token is None:
        from dashboard.context import warn

        warn("drawdown serve: not on loopback; generating an access token.")
    return serve(ctx, args.host, int(args.port), token=token)
