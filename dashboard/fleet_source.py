"""The fleet behind the dashboard's Fleet page (``drawdown serve --dataset DIR``).

A :class:`FleetSource` hangs on the Flask app's config (``DRAWDOWN_FLEET``) beside the
:class:`~dashboard.data.DataSource` of ``--store``, and does three things:

* **The fleet report.** :func:`analysis.fleet.fleet_report` -- the very function ``drawdown
  fleet report`` runs, unchanged -- runs in a background thread when the server starts; its
  progress (vehicles analysed of all) is what the Fleet page shows until the table is there.
* **Its cache.** The finished report is written to ``<cache>/report-<key>.json``, where the key
  is the dataset's state (:func:`dataset_state`: per vehicle its parts' names and sizes -- part
  names are content hashes -- and its system.toml, plus drawdown's version). A restart on an
  unchanged dataset reads the table from there instead of analysing again; a changed dataset
  gets a new report. Nothing is ever written into the dataset.
* **A vehicle's own pages.** Opening a vehicle (``/fleet/open?vehicle=NAME``, a Flask route in
  :func:`install_fleet_routes`) copies its readings from the dataset, a month at a time, into a
  drawdown store of its own in ``<cache>/vehicles/<name>/<key>/`` (``readings.sqlite`` and its
  ``system.toml``), once per vehicle state; a cookie then names the vehicle this browser looks at,
  and :func:`dashboard.data.current` hands every page that vehicle's data source. A vehicle
  store is written under a hidden name and renamed when complete, so a page never reads half of
  one.

The vehicle name from a request is checked (``fleet_dataset.check_vehicle_name``) and looked up
among the dataset's own vehicles; a path is only ever built from a name the dataset listed.
"""

from __future__ import annotations

import hashlib
import html
import json
import logging
import math
import os
import re
import shutil
import threading
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any
from urllib.parse import quote

from drawdown.dashboard.data import DataSource

log = logging.getLogger(__name__)

#: The cookie naming the vehicle this browser looks at (not a secret: which vehicle, never a path).
VEHICLE_COOKIE = "drawdown_vehicle"
#: How long the browser keeps it [s] (a week, as the token cookie).
VEHICLE_COOKIE_MAX_AGE_S = 7 * 24 * 3600
#: Bumped when the cache's layout or content changes: older cache files are then not read.
CACHE_FORMAT = 1
#: Written last into a vehicle store's folder: the store is complete.
READY = "ready.json"
#: The page a vehicle opens on, and the pages ``/fleet/open?to=`` may name.
VEHICLE_PAGES = ("/trip", "/", "/health", "/solar", "/planner", "/setup")
#: The "opening" page reloads itself this often while a vehicle's store is written [s].
OPENING_REFRESH_S = 1


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _utc_now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())


def _json_safe(obj: Any) -> Any:
    """``obj`` with NaN/inf as None and numpy scalars as Python numbers (JSON holds no NaN)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_json_safe(v) for v in obj]
    if hasattr(obj, "item") and callable(obj.item):  # numpy scalar
        return _json_safe(obj.item())
    if hasattr(obj, "isoformat"):
        return obj.isoformat()
    return obj


# --------------------------------------------------------------------------------------------
# the dataset's state
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class DatasetState:
    """What the dataset holds now: ``key`` changes whenever any vehicle's readings or system change.

    Attributes
    ----------
    key : the whole dataset's state (the fleet report's cache key)
    vehicles : per vehicle name, its own state (its store's cache key), in name order
    """

    key: str
    vehicles: dict[str, str]


def dataset_state(dataset: str) -> DatasetState:
    """The dataset's state from one listing (names and sizes) and each vehicle's system.toml.

    Only what the fleet report reads counts: the live and superseded parts (their names are
    content hashes, docs/fleet.md#the-dataset-layout) and the system description; the ingest
    record and hidden temporary files do not.
    """
    import fsspec

    from drawdown import __version__
    from drawdown.collector import fleet_dataset

    names = fleet_dataset.vehicles(dataset)
    fs, root = fsspec.core.url_to_fs(str(dataset))
    root = str(root).rstrip("/")
    fs.invalidate_cache(root)
    files: dict[str, list[tuple[str, int]]] = {n: [] for n in names}
    for path, info in fs.find(root, detail=True).items():
        rel = str(path)[len(root):].lstrip("/")
        parts = rel.split("/")
        if len(parts) < 2 or any(p.startswith((".", "_")) for p in parts):
            continue
        name = parts[0].removeprefix("vehicle=")
        if name in files and parts[0].startswith("vehicle=") and parts[-1] != fleet_dataset.SYSTEM:
            files[name].append(("/".join(parts[1:]), int(info.get("size") or 0)))
    per: dict[str, str] = {}
    for name in names:
        try:
            system = _sha(fleet_dataset.vehicle_system_text(dataset, name))
        except FileNotFoundError:
            system = None
        per[name] = _sha(json.dumps({"format": CACHE_FORMAT, "system": system, "parts": sorted(files[name])}))
    key = _sha(json.dumps({"format": CACHE_FORMAT, "drawdown": __version__, "vehicles": sorted(per.items())}))
    return DatasetState(key=key, vehicles=per)


def default_cache_dir(store_folder: Path, dataset: str) -> Path:
    """``<store folder>/fleet-cache/<dataset's last name>-<hash of its full path or URL>``."""
    text = str(dataset)
    full = text if "://" in text else str(Path(text).expanduser().resolve())
    last = re.sub(r"[^A-Za-z0-9._-]+", "_", full.rstrip("/").rsplit("/", 1)[-1])[:40] or "dataset"
    return store_folder / "fleet-cache" / f"{last}-{_sha(full)[:12]}"


# --------------------------------------------------------------------------------------------
# what the Fleet page shows
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class FleetTable:
    """A finished fleet report, as the Fleet page shows it.

    Attributes
    ----------
    key : the dataset state it was made from
    fleet : the report's rows (``fleet_report(...)["fleet"]``), most urgent first
    meta : the report's ``vehicles``, ``workers``, ``scheduler``, ``tasks``
    finished_at : when it finished (UTC ISO 8601)
    seconds : how long it ran
    from_cache : read from the cache file, not computed by this server
    solar_why : per vehicle, why its solar ratio is unknown (from its report), when it is
    cache_error : why the report could not be written to the cache, else None
    """

    key: str
    fleet: list[dict[str, Any]]
    meta: dict[str, Any]
    finished_at: str | None
    seconds: float | None
    from_cache: bool = False
    solar_why: dict[str, str] = field(default_factory=dict)
    cache_error: str | None = None

    @classmethod
    def from_doc(cls, doc: dict[str, Any], *, from_cache: bool) -> FleetTable:
        report = doc["report"]
        solar_why = {}
        for name, rep in (report.get("reports") or {}).items():
            why = ((rep or {}).get("solar") or {}).get("performance_ratio_why")
            if why:
                solar_why[name] = str(why)
        meta = {k: report.get(k) for k in ("vehicles", "workers", "scheduler", "tasks")}
        return cls(key=doc["key"], fleet=list(report.get("fleet") or []), meta=meta,
                   finished_at=doc.get("finished_at"), seconds=doc.get("seconds"), from_cache=from_cache,
                   solar_why=solar_why)


@dataclass(frozen=True)
class FleetStatus:
    """A snapshot of the fleet report for the page.

    Attributes
    ----------
    running : a report is being computed now
    done, total : vehicles analysed so far, of all (of the running report)
    table : the newest finished table, or None
    stale : ``table`` is of an earlier dataset state (a new report is running or failed)
    error : why the last run failed (or the dataset could not be listed), else None
    workers : the worker processes asked for (a local cluster) or the scheduler's address
    """

    running: bool
    done: int
    total: int
    table: FleetTable | None
    stale: bool
    error: str | None
    workers: str


@dataclass
class OpenJob:
    """Writing one vehicle's store: months written of all, or why it failed."""

    name: str
    key: str
    state: str = "running"  # running | ready | failed
    done: int = 0
    total: int = 0
    error: str | None = None


@dataclass(frozen=True)
class VehicleView:
    """The vehicle a browser looks at: its name, its data source, and whether the dataset has
    changed since its store was written (``stale``)."""

    name: str
    source: DataSource
    stale: bool = False


class FleetSource:
    """The fleet dataset of one running dashboard (see the module docstring).

    Parameters
    ----------
    dataset
        The fleet dataset: a folder or an fsspec URL (docs/fleet.md).
    cache_dir
        Where the report cache and the vehicles' stores go (created when missing).
    scheduler, n_workers, memory_limit
        As ``drawdown fleet report``'s ``--scheduler``, ``--workers`` and ``--memory-limit``.
    report_fn
        The fleet report function (:func:`analysis.fleet.fleet_report`; tests may pass another).
    """

    def __init__(self, dataset: str, cache_dir: Path, *, scheduler: str | None = None, n_workers: int = 2,
                 memory_limit: str = "4GB", report_fn: Callable[..., dict[str, Any]] | None = None):
        self.dataset = str(dataset)
        self.cache_dir = Path(cache_dir)
        self.scheduler = scheduler
        self.n_workers = int(n_workers)
        self.memory_limit = memory_limit
        self._report_fn = report_fn
        self._lock = threading.Lock()
        self._state: DatasetState | None = None
        self._table: FleetTable | None = None
        self._running = False
        self._done = 0
        self._total = 0
        self._error: str | None = None
        self._thread: threading.Thread | None = None
        self._jobs: dict[str, OpenJob] = {}
        self._sources: dict[tuple[str, str], DataSource] = {}
        self._ready: dict[str, str] = {}  # vehicle -> the key of its newest complete store

    # -- names a page may show ----------------------------------------------------------------
    @property
    def dataset_name(self) -> str:
        """The dataset's last path component (a page names the dataset by it, never by a server path)."""
        return self.dataset.rstrip("/").rsplit("/", 1)[-1] or self.dataset

    def scrub(self, text: str) -> str:
        """``text`` with the dataset's and the cache's server paths replaced by short names."""
        from drawdown.dashboard.security import scrub_paths

        paths = {self.dataset: self.dataset_name, str(self.cache_dir): "(cache)"}
        if "://" not in self.dataset:
            paths[str(Path(self.dataset).expanduser().resolve())] = self.dataset_name
        return scrub_paths(text, paths)

    # -- the fleet report ----------------------------------------------------------------------
    def _report_path(self, key: str) -> Path:
        return self.cache_dir / f"report-{key[:32]}.json"

    def _load_cache(self, key: str) -> FleetTable | None:
        path = self._report_path(key)
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except FileNotFoundError:
            return None
        except (OSError, ValueError) as exc:
            log.warning("fleet report cache %s unreadable (%s); analysing again", path, exc)
            return None
        if doc.get("format") != CACHE_FORMAT or doc.get("key") != key or "report" not in doc:
            return None
        return FleetTable.from_doc(doc, from_cache=True)

    def _write_cache(self, doc: dict[str, Any]) -> None:
        """Write the report under a hidden name, rename it, then remove older reports."""
        self.cache_dir.mkdir(parents=True, exist_ok=True)
        path = self._report_path(doc["key"])
        tmp = path.with_name(f".{path.name}.tmp-{uuid.uuid4().hex[:8]}")
        try:
            tmp.write_text(json.dumps(doc, allow_nan=False), encoding="utf-8")
            os.replace(tmp, path)
        finally:
            tmp.unlink(missing_ok=True)
        for old in self.cache_dir.glob("report-*.json"):
            if old != path:
                old.unlink(missing_ok=True)

    def refresh_state(self) -> DatasetState:
        """List the dataset now; remember each vehicle's state (and its store, when one is ready)."""
        state = dataset_state(self.dataset)
        with self._lock:
            self._state = state
            for name, key in state.vehicles.items():
                if (self._vehicle_dir(name, key) / READY).is_file():
                    self._ready[name] = key
        return state

    def ensure_report(self) -> None:
        """Make sure the table is of the dataset as it is now: read it from the cache, or start the
        fleet report in a background thread (unless one is running). A failed run is tried again
        on the next call (the Fleet page calls this when it is opened)."""
        with self._lock:
            if self._running:
                return
        try:
            state = self.refresh_state()
        except Exception as exc:  # noqa: BLE001 - the page says why, the server goes on
            log.exception("listing the fleet dataset failed")
            with self._lock:
                self._error = f"the dataset {self.dataset_name} cannot be listed: {self.scrub(str(exc))}"
            return
        cached = None
        with self._lock:
            current_table = self._table
        if current_table is None or current_table.key != state.key:
            cached = self._load_cache(state.key)
        with self._lock:
            if self._running:
                return
            if self._table is not None and self._table.key == state.key:
                return
            if cached is not None:
                self._table, self._error = cached, None
                return
            self._running, self._done, self._total, self._error = True, 0, len(state.vehicles), None
            self._thread = threading.Thread(target=self._run, args=(state,), name="drawdown-fleet-report",
                                            daemon=True)
            self._thread.start()

    def _progress(self, done: int, total: int) -> None:
        with self._lock:
            self._done, self._total = int(done), int(total)

    def _run(self, state: DatasetState) -> None:
        t0 = time.monotonic()
        try:
            fn = self._report_fn
            if fn is None:
                from drawdown.analysis.fleet import fleet_report

                fn = fleet_report
            out = fn(self.dataset, list(state.vehicles), scheduler=self.scheduler, n_workers=self.n_workers,
                     memory_limit=self.memory_limit, progress=self._progress)
            doc = {"format": CACHE_FORMAT, "key": state.key, "dataset": self.dataset, "finished_at": _utc_now(),
                   "seconds": round(time.monotonic() - t0, 3), "report": _json_safe(out)}
            table = FleetTable.from_doc(doc, from_cache=False)
            try:
                self._write_cache(doc)
            except OSError as exc:
                log.warning("fleet report not cached: %s", exc)
                table = replace(table, cache_error=f"the report could not be cached ({exc.strerror or exc}); "
                                                   "a restart analyses the fleet again")
            with self._lock:
                self._table, self._error = table, None
        except Exception as exc:  # noqa: BLE001 - the page says why; reloading it tries again
            log.exception("fleet report failed")
            with self._lock:
                self._error = f"the fleet report could not run: {self.scrub(f'{type(exc).__name__}: {exc}')}"
        finally:
            with self._lock:
                self._running = False

    def wait(self, timeout_s: float | None = None) -> bool:
        """Wait for a running report (tests, scripts); True when none is running any more."""
        thread = self._thread
        if thread is not None:
            thread.join(timeout_s)
        with self._lock:
            return not self._running

    def status(self) -> FleetStatus:
        """What the Fleet page shows now."""
        with self._lock:
            stale = self._table is not None and self._state is not None and self._table.key != self._state.key
            workers = self.scheduler or f"{self.n_workers} local worker process{'es' if self.n_workers != 1 else ''}"
            return FleetStatus(running=self._running, done=self._done, total=self._total, table=self._table,
                               stale=stale, error=self._error, workers=workers)

    # -- one vehicle's own store -----------------------------------------------------------------
    def _vehicle_dir(self, name: str, key: str) -> Path:
        return self.cache_dir / "vehicles" / name / key[:16]

    def vehicle_names(self) -> list[str]:
        with self._lock:
            return list(self._state.vehicles) if self._state is not None else []

    def open_vehicle(self, name: str) -> OpenJob:
        """Start (or follow) writing ``name``'s store; KeyError when the dataset has no such vehicle.

        ``name`` must already have passed ``check_vehicle_name``; it is only used once found among
        the dataset's vehicles.
        """
        state = self.refresh_state()
        if name not in state.vehicles:
            raise KeyError(name)
        key = state.vehicles[name]
        with self._lock:
            if self._ready.get(name) == key:
                return OpenJob(name, key, state="ready")
            job = self._jobs.get(name)
            if job is not None and job.key == key and job.state == "running":
                return replace(job)
            if job is not None and job.key == key and job.state == "failed":
                del self._jobs[name]  # shown once; opening it again tries again
                return replace(job)
            job = OpenJob(name, key)
            self._jobs[name] = job
        threading.Thread(target=self._materialise, args=(job,), name=f"drawdown-open-{name}", daemon=True).start()
        return replace(job)

    def _materialise(self, job: OpenJob) -> None:
        try:
            self.materialise(job.name, job.key, job)
            with self._lock:
                job.state = "ready"
                self._ready[job.name] = job.key
                if self._jobs.get(job.name) is job:
                    del self._jobs[job.name]
        except Exception as exc:  # noqa: BLE001 - the opening page says why
            log.exception("writing the store of %s failed", job.name)
            with self._lock:
                job.state = "failed"
                job.error = self.scrub(f"{type(exc).__name__}: {exc}")

    def materialise(self, name: str, key: str, job: OpenJob | None = None) -> Path:
        """Write ``name``'s readings and system.toml into ``<cache>/vehicles/<name>/<key>/``, a month
        at a time (memory: one vehicle-month); returns the folder. Older states of the vehicle
        are removed once the new one is complete."""
        from drawdown.collector import fleet_dataset
        from drawdown.collector.canonical import VALUE_COLUMNS
        from drawdown.collector.store import Store

        import numpy as np

        final = self._vehicle_dir(name, key)
        if (final / READY).is_file():
            return final
        parent = final.parent
        parent.mkdir(parents=True, exist_ok=True)
        tmp = parent / f".tmp-{final.name}-{uuid.uuid4().hex[:8]}"
        tmp.mkdir()
        try:
            try:
                system_text = fleet_dataset.vehicle_system_text(self.dataset, name)
            except FileNotFoundError:
                raise ValueError(f"{name} has no system.toml in the dataset {self.dataset_name}; its pages need one "
                                 "(ingest the vehicle from a folder holding its system.toml beside the "
                                 "readings)") from None
            months = fleet_dataset.vehicle_months(self.dataset, name)
            if job is not None:
                job.total = len(months)
            rows = 0
            source = f"{self.dataset.rstrip('/')}/vehicle={name}"
            with Store(tmp / "readings.sqlite") as store:
                import_id = store.record_import(path=source, sha256=key, rows_stored=0, rows_rejected=0,
                                                summary={"fleet_dataset": self.dataset, "vehicle": name})
                for month, names, codes, t, values in fleet_dataset.iter_vehicle_months(self.dataset, name):
                    cuts = np.flatnonzero(np.diff(codes)) + 1
                    starts = np.concatenate([[0], cuts]).astype(int)
                    ends = np.concatenate([cuts, [len(codes)]]).astype(int)
                    with store.transaction():  # one month, one transaction (a loop over channels)
                        for s, e in zip(starts, ends):
                            store.append_arrays(names[int(codes[s])], t[s:e],
                                                {col: values[j][s:e] for j, col in enumerate(VALUE_COLUMNS)},
                                                import_id=import_id)
                    rows += len(t)
                    if job is not None:
                        job.done += 1
                store.update_import(import_id, rows_stored=rows, rows_rejected=0,
                                    summary={"fleet_dataset": self.dataset, "vehicle": name, "months": months,
                                             "rows": rows})
            (tmp / "system.toml").write_text(system_text, encoding="utf-8")
            (tmp / READY).write_text(json.dumps({"vehicle": name, "key": key, "rows": rows, "months": months,
                                                 "written_at": _utc_now()}), encoding="utf-8")
            if final.exists():  # an incomplete folder left by a stopped server
                shutil.rmtree(final)
            os.rename(tmp, final)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
        for old in parent.iterdir():
            if old != final and not old.name.startswith("."):
                shutil.rmtree(old, ignore_errors=True)
        return final

    def _source(self, name: str, key: str) -> DataSource:
        folder = self._vehicle_dir(name, key)
        with self._lock:
            src = self._sources.get((name, key))
            if src is None:
                src = DataSource(folder / "readings.sqlite", folder / "system.toml", read_only=(
                    f"{name}'s readings and system description come from the fleet dataset {self.dataset_name}; "
                    "this dashboard only shows them. Change them at their source and ingest it again "
                    "(drawdown fleet ingest)."))
                self._sources[(name, key)] = src
            return src

    def view(self, name: str | None) -> VehicleView | None:
        """The vehicle ``name`` (a cookie's value: checked here) when its store is ready, else None."""
        from drawdown.collector.fleet_dataset import FleetInputError, check_vehicle_name

        if not name:
            return None
        try:
            check_vehicle_name(name)
        except FleetInputError:
            return None
        with self._lock:
            key = self._ready.get(name)
            newest = self._state.vehicles.get(name) if self._state is not None else None
        if key is None or not (self._vehicle_dir(name, key) / READY).is_file():
            return None
        return VehicleView(name, self._source(name, key), stale=newest is not None and newest != key)

    def view_for_request(self, request: Any) -> VehicleView | None:
        """The vehicle the request's cookie names, when its store is ready."""
        return self.view(request.cookies.get(VEHICLE_COOKIE))


# --------------------------------------------------------------------------------------------
# the route that opens a vehicle
# --------------------------------------------------------------------------------------------

def _text_page(status: int, title: str, lines: list[str], *, refresh: bool = False) -> Any:
    """A small page in the dashboard's look (no script: the security policy allows none inline)."""
    import flask

    body = "".join(f"<p>{line}</p>" for line in lines)
    meta = f'<meta http-equiv="refresh" content="{OPENING_REFRESH_S}">' if refresh else ""
    page = (f'<!doctype html><html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">{meta}'
            f'<title>drawdown - {html.escape(title)}</title><link rel="stylesheet" href="/assets/drawdown.css"></head>'
            f'<body><div class="shell"><header class="topbar"><div class="brand"><span class="brand-name">drawdown'
            f'</span><span class="brand-sub">battery bank log review</span></div></header>'
            f'<main class="page"><h1>{html.escape(title)}</h1>{body}'
            f'<p><a href="/fleet">Back to the fleet</a></p></main></div></body></html>')
    resp = flask.Response(page, status=status, mimetype="text/html")
    resp.headers["Cache-Control"] = "no-store"
    return resp


def install_fleet_routes(server: Any, fleet: FleetSource) -> None:
    """``GET /fleet/open?vehicle=NAME[&to=/health]``: write the vehicle's store if needed (a page that
    reloads itself says how far it is), then set the vehicle cookie and go to its Trip review (or
    the page ``to`` names, one of :data:`VEHICLE_PAGES`).

    The app's guards run first (host, token, origin: ``dashboard.security``); this route also
    refuses a request another site's page started (``Sec-Fetch-Site: cross-site``), since it
    switches what this browser's pages show.
    """
    import flask

    from drawdown.collector.fleet_dataset import FleetInputError, check_vehicle_name

    @server.route("/fleet/open")
    def fleet_open() -> Any:
        req = flask.request
        if req.headers.get("Sec-Fetch-Site", "").lower() == "cross-site":
            return _text_page(403, "Not opened", ["A vehicle is opened from the dashboard's own Fleet page, "
                                                  "not from another site's page."])
        name = req.args.get("vehicle")
        if name is None or name == "":
            return _text_page(400, "No vehicle named", ["This address needs the vehicle to open: "
                                                        "/fleet/open?vehicle=NAME (pick one on the Fleet page)."])
        try:
            check_vehicle_name(name)
        except FleetInputError as exc:
            return _text_page(400, "Not a vehicle name", [html.escape(str(exc))])
        to = req.args.get("to", VEHICLE_PAGES[0])
        if to not in VEHICLE_PAGES:
            return _text_page(400, "Not a page", [html.escape(f"to={to!r}: a vehicle opens on one of "
                                                              f"{', '.join(VEHICLE_PAGES)}.")])
        try:
            job = fleet.open_vehicle(name)
        except KeyError:
            known = fleet.vehicle_names()
            shown = ", ".join(known[:12]) + (f" and {len(known) - 12} more" if len(known) > 12 else "")
            return _text_page(404, "No such vehicle", [html.escape(
                f"The fleet dataset {fleet.dataset_name} holds no vehicle {name!r}; it holds "
                f"{len(known)}: {shown or 'none'}.")])
        except Exception as exc:  # noqa: BLE001 - the dataset cannot be listed: say so on the page
            log.exception("opening %s failed", name)
            return _text_page(500, f"{name} not opened", [html.escape(fleet.scrub(f"{type(exc).__name__}: {exc}"))])
        if job.state == "ready":
            resp = flask.redirect(to, code=303)
            resp.set_cookie(VEHICLE_COOKIE, name, max_age=VEHICLE_COOKIE_MAX_AGE_S, httponly=True, samesite="Lax",
                            secure=req.is_secure)
            resp.headers["Cache-Control"] = "no-store"
            return resp
        if job.state == "failed":
            return _text_page(500, f"{name} could not be opened", [
                html.escape(job.error or "unknown error"),
                f'<a href="/fleet/open?vehicle={quote(name)}&amp;to={quote(to)}">Try again</a>'])
        months = (f"{job.done} of {job.total} months written" if job.total else "listing its months")
        return _text_page(202, f"Opening {name}", [
            html.escape(f"Copying {name}'s readings from the fleet dataset into a store of its own, so that its "
                        f"pages can read them: {months}. This is done once; later visits open at once."),
            "This page reloads by itself."], refresh=True)
