"""``drawdown serve [--host H] [--port P] [--token T] [--dataset DIR] [--cache DIR] [--workers N]
[--scheduler ADDRESS] [--memory-limit SIZE] [--json]``: the dashboard.

With ``--dataset`` (a fleet dataset ``drawdown fleet ingest`` wrote) the dashboard also has the
Fleet page: the fleet report runs in the background as ``drawdown fleet report`` would
(``--workers``, ``--scheduler``, ``--memory-limit`` mean what they mean there) and is cached in
``--cache`` (default ``fleet-cache/`` beside the store), with the vehicles' own stores when their
pages are opened (:mod:`dashboard.fleet_source`). A dataset with no vehicles is bad input.

Bound to 127.0.0.1 by default. With ``--host`` other than a loopback address
the dashboard requires an access token on every request: ``--token`` or one
generated and printed on stderr at start. ``--json`` prints one JSON object
(``url``, ``host``, ``port``, ``token_required``, and ``dataset`` with one) on stdout once the port is
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
    add_fleet_arguments(s)


def add_fleet_arguments(s: argparse.ArgumentParser) -> None:
    """The Fleet page's options (``serve`` and ``demo --fleet``)."""
    s.add_argument("--dataset", metavar="DIR", default=None,
                   help="a fleet dataset (drawdown fleet ingest): adds the Fleet page and each vehicle's pages")
    s.add_argument("--cache", metavar="DIR", default=None,
                   help="with --dataset: where the fleet report and the vehicles' stores are cached "
                        "(default: fleet-cache/ beside the store)")
    s.add_argument("--workers", type=int, default=None,
                   help="with --dataset: local worker processes of the fleet report (default 2)")
    s.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="with --dataset: a running dask.distributed scheduler (tcp://host:8786) instead of local workers")
    s.add_argument("--memory-limit", default=None, metavar="SIZE",
                   help="with --dataset: memory per local worker (default 4GB)")


def fleet_source(args: Any, ctx: Context, dataset: str | None = None) -> Any:
    """The FleetSource of ``--dataset`` (or ``dataset``), or None without one; UsageError for bad input."""
    import os
    from pathlib import Path

    dataset = dataset if dataset is not None else getattr(args, "dataset", None)
    if dataset is None:
        for opt in ("cache", "workers", "scheduler", "memory_limit"):
            if getattr(args, opt, None) is not None:
                raise UsageError(f"--{opt.replace('_', '-')}: only means something with --dataset DIR (a fleet "
                                 "dataset); leave it out, or add --dataset")
        return None
    import fsspec  # noqa: F401 - a missing fleet extra surfaces here, with its install line

    from drawdown.collector import fleet_dataset
    from drawdown.dashboard.fleet_source import FleetSource, default_cache_dir

    workers = 2 if args.workers is None else int(args.workers)
    if workers < 1:
        raise UsageError(f"--workers must be at least 1, got {workers}")
    if args.scheduler is not None and args.workers is not None:
        raise UsageError("--workers starts local worker processes; with --scheduler the cluster's own workers "
                         "run the report: give one of them")
    local = "://" not in dataset
    if local and not Path(dataset).expanduser().is_dir():
        what = "is a file" if Path(dataset).expanduser().exists() else "no such folder"
        raise UsageError(f"--dataset {dataset}: {what}; give the folder drawdown fleet ingest wrote "
                         "('drawdown fleet ingest SRC --dataset DIR')")
    try:
        names = fleet_dataset.vehicles(dataset)
    except fleet_dataset.FleetInputError as exc:
        raise UsageError(f"--dataset {exc}") from None
    except OSError as exc:
        raise UsageError(f"--dataset {dataset}: cannot read it ({exc.strerror or exc})") from None
    if not names:
        raise UsageError(f"--dataset {dataset}: no vehicles there (no vehicle=<name> folders); ingest some first "
                         "('drawdown fleet ingest SRC --dataset DIR')")
    if local:
        dataset = os.fspath(Path(dataset).expanduser())
    cache = Path(args.cache).expanduser() if getattr(args, "cache", None) else default_cache_dir(ctx.store_path.parent,
                                                                                                  dataset)
    try:
        cache.mkdir(parents=True, exist_ok=True)
        probe = cache / f".write-test-{os.getpid()}"
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as exc:
        raise UsageError(f"--cache {cache}: cannot write the fleet cache there ({exc.strerror or exc}); "
                         "give a folder this user may write with --cache DIR") from None
    return FleetSource(dataset, cache, scheduler=args.scheduler, n_workers=workers,
                       memory_limit=str(args.memory_limit or "4GB"))


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
    fleet = fleet_source(args, ctx)
    if fleet is not None:
        warn(f"drawdown serve: fleet dataset {fleet.dataset}; the fleet report and the vehicles' stores are "
             f"cached in {fleet.cache_dir}")
    elif not ctx.store_path.exists():
        warn(f"drawdown serve: no store at {ctx.store_path} yet; the pages will say so until you import a log.")
    if not ctx.system_path.exists() and fleet is None:
        warn(f"drawdown serve: no system description at {ctx.system_path} yet; the System setup page writes it.")
    if not is_loopback(args.host) and token is None:
        warn("drawdown serve: not on loopback; generating an access token.")

    def listening(url: str) -> None:
        print_json({"url": url, "host": args.host, "port": int(args.port), "token_required": "?token=" in url,
                    **({"dataset": fleet.dataset} if fleet is not None else {})})
        sys.stdout.flush()

    return serve(ctx, args.host, int(args.port), token=token,
                 on_listening=listening if getattr(args, "json", False) else None, fleet=fleet)
