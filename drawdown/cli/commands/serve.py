"""``drawdown serve [--host H] [--port P] [--token T] [--json]``: the dashboard.

Bound to 127.0.0.1 by default. With ``--host`` other than a loopback address
the dashboard requires an access token on every request: ``--token`` or one
generated and printed on stderr at start. ``--json`` prints one JSON object
(``url``, ``host``, ``port``, ``token_required``) on stdout once the port is
bound, for scripts that start the dashboard. A port that is taken, a port
below 1024 without the rights for it, or a ``--host`` that is not an address
of this computer is bad input (exit 2), named with what to do.
"""

from __future__ import annotations

import argparse
import errno
import socket
import sys
from typing import Any

from drawdown.cli.context import Context, UsageError, print_json, warn


NAME = "serve"
HELP = "the dashboard"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--token", default=None, help="access token (required off loopback; generated if absent)")
    s.add_argument("--json", action="store_true", help="print the address as one JSON object once listening")


def check_can_listen(host: str, port: int) -> None:
    """Bind ``host:port`` once and let go, so that a taken port is a clear UsageError.

    The server itself binds with SO_REUSEADDR; so does this check, so a port left in
    TIME_WAIT by a dashboard that just stopped counts as free, as it is for the server.
    """
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except socket.gaierror:
        raise UsageError(f"--host {host}: not a known address or name of this computer "
                         "(e.g. 127.0.0.1, or 0.0.0.0 for every interface)") from None
    family, _, _, _, address = infos[0]
    with socket.socket(family, socket.SOCK_STREAM) as s:
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            s.bind(address)
        except OSError as exc:
            if exc.errno == errno.EADDRINUSE:
                raise UsageError(f"--port {port}: port {port} on {host} is already in use by another program "
                                 f"(another drawdown serve?); stop it, or choose another port, e.g. "
                                 f"--port {port + 1 if port < 65535 else 8050}") from None
            if exc.errno == errno.EACCES:
                raise UsageError(f"--port {port}: this user may not listen on port {port} (ports below 1024 "
                                 "need administrator rights); choose e.g. --port 8050") from None
            if exc.errno == errno.EADDRNOTAVAIL:
                raise UsageError(f"--host {host}: not an address of this computer; use 127.0.0.1, "
                                 "one of this computer's own addresses, or 0.0.0.0 for every interface") from None
            raise UsageError(f"--host {host} --port {port}: cannot listen there ({exc.strerror or exc})") from None


def run(args: Any, ctx: Context) -> int:
    from drawdown.dashboard.app import serve
    from drawdown.dashboard.security import is_loopback

    token = getattr(args, "token", None)
    if token is not None and len(token) < 16:
        raise UsageError("--token must be at least 16 characters (omit it to have one generated)")
    if not (1 <= int(args.port) <= 65535):
        raise UsageError(f"--port {args.port}: expected a TCP port between 1 and 65535")
    check_can_listen(args.host, int(args.port))
    if not ctx.store_path.exists():
        warn(f"drawdown serve: no store at {ctx.store_path} yet; the pages will say so until you import a log.")
    if not ctx.system_path.exists():
        warn(f"drawdown serve: no system description at {ctx.system_path} yet; the System setup page writes it.")
    if not is_loopback(args.host) and token is None:
        warn("drawdown serve: not on loopback; generating an access token.")

    def listening(url: str) -> None:
        print_json({"url": url, "host": args.host, "port": int(args.port),
                    "token_required": "?token=" in url})
        sys.stdout.flush()

    return serve(ctx, args.host, int(args.port), token=token,
                 on_listening=listening if getattr(args, "json", False) else None)
