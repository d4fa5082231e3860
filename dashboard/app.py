"""The Dash app: a thin shell (title bar, page links, shared date-range store) around the pages.

Layout, callbacks and data access are kept apart: each page is a module in
``dashboard/pages/`` (``dash.register_page``, a ``layout(**kwargs)`` function
and its ``@callback``s); component ids come from :mod:`dashboard.ids`; figures
from :mod:`dashboard.figures`; every read of the store and every analysis call
goes through :mod:`dashboard.data`, whose :class:`~dashboard.data.DataSource`
hangs on the Flask app's config (not in a module global), so two apps in one
process never share state.

Served with a fleet dataset (``fleet``, a :class:`~dashboard.fleet_source.FleetSource`), the
app also has the Fleet page (first in the page links), the ``/fleet/open`` route that opens one
vehicle's pages, and a line under the title bar naming the vehicle these pages show.

``serve`` binds to 127.0.0.1 by default. Bound to any other address it
requires a token (see :mod:`dashboard.security`); a token given explicitly is
enforced on loopback too.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import dash
from dash import Input, Output, dcc, html

from drawdown.dashboard import ids
from drawdown.dashboard.data import DataSource
from drawdown.dashboard.security import (install_body_limit, install_host_guard, install_security_headers,
                                install_token_guard, is_loopback, new_token, quiet_request_handler)

HERE = Path(__file__).resolve().parent

#: (path, label) of the page links, in the order a user needs them.
NAV_LINKS: tuple[tuple[str, str], ...] = (
    ("/", "Now"),
    ("/trip", "Trip review"),
    ("/health", "Battery health"),
    ("/solar", "Solar"),
    ("/planner", "Upgrade planner"),
    ("/setup", "System setup"),
)


#: The Fleet page's link, first when the dashboard is served with a fleet dataset.
FLEET_LINK: tuple[str, str] = ("/fleet", "Fleet")


def _fleet() -> Any:
    """The app's FleetSource (``drawdown serve --dataset``), or None."""
    import flask

    return flask.current_app.config.get("DRAWDOWN_FLEET") if flask.has_app_context() else None


def nav_items() -> tuple[tuple[str, str], ...]:
    """(path, label) of the page links of this app: the Fleet page first when it has a dataset."""
    return (FLEET_LINK, *NAV_LINKS) if _fleet() is not None else NAV_LINKS


def nav_links(pathname: str | None) -> list[dcc.Link]:
    """The page links, the current page marked with class 'active' and a title."""
    links = []
    for path, label in nav_items():
        here = (pathname or "/").rstrip("/") == path.rstrip("/")
        links.append(dcc.Link(label, href=path, className="nav-link active" if here else "nav-link",
                              title=f"{label} (this page)" if here else label))
    return links


def vehicle_bar() -> html.Div | None:
    """With a fleet dataset: the line that names the vehicle these pages show, and the way back."""
    import flask

    fleet = _fleet()
    if fleet is None:
        return None
    view = fleet.view_for_request(flask.request) if flask.has_request_context() else None
    back = dcc.Link("back to the fleet", href=FLEET_LINK[0], className="vehicle-back")
    if view is None:
        store = flask.current_app.config["DRAWDOWN_SOURCE"].store_path.name
        children: list[Any] = ["No vehicle open: these pages show the store ", html.Strong(store), " · ",
                               dcc.Link("open a vehicle on the Fleet page", href=FLEET_LINK[0], className="vehicle-back")]
    else:
        children = ["Vehicle ", html.Strong(view.name, className="vehicle-name"), " · ", back]
        if view.stale:
            children += [html.Span(" · the dataset has changed since these pages were prepared; open the vehicle "
                                   "again from the Fleet page to see the newest readings", className="vehicle-stale")]
    return html.Div(id=ids.VEHICLE_BAR, className="vehicle-bar", children=children)


def _shell() -> html.Div:
    bar = vehicle_bar()
    return html.Div(className="shell", children=[
        dcc.Location(id=ids.URL, refresh=False),
        html.Header(className="topbar", children=[
            html.Div(className="brand", children=[html.Span("drawdown", className="brand-name"),
                                                   html.Span("battery bank log review", className="brand-sub")]),
            html.Nav(id=ids.NAV, className="nav", children=nav_links("/")),
        ]),
        *([bar] if bar is not None else []),
        # The date range picked on the trip page, read by health/solar/planner (session-scoped).
        dcc.Store(id=ids.RANGE_STORE, storage_type="session"),
        html.Main(className="page", children=[dash.page_container]),
        html.Footer(className="footer", children=[
            "Figures come from your own logs; advice on cables, fuses and chargers must be checked against "
            "local electrical codes by a qualified installer."]),
    ])


def _reset_global_callbacks() -> None:
    """Drop callbacks that an earlier, never-served app in this process left in Dash's global list.

    Page modules register their ``@callback``s in Dash's module-level list each
    time an app imports them; the first app to serve a request takes them. A
    second app built in the same process (tests) would otherwise inherit
    duplicates.
    """
    from dash import _callback

    _callback.GLOBAL_CALLBACK_LIST.clear()
    _callback.GLOBAL_CALLBACK_MAP.clear()


def create_app(ctx: Any, *, token: str | None = None, host: str = "127.0.0.1", fleet: Any = None) -> dash.Dash:
    """Build the dashboard for a store and system description.

    Parameters
    ----------
    ctx
        A :class:`drawdown.cli.context.Context` (anything with ``store_path`` and
        ``system_path``).
    token
        When given, every request must carry it (``?token=`` once, then a
        cookie, or ``Authorization: Bearer``); see :mod:`dashboard.security`.
    host
        The address the server binds. On loopback, requests must name this computer in
        ``Host`` (no DNS rebinding); everywhere, a state-changing request must come from
        the dashboard's own page (``Origin``).
    fleet
        A :class:`dashboard.fleet_source.FleetSource` (``drawdown serve --dataset``): adds the
        Fleet page's link, the ``/fleet/open`` route and the vehicle line. Its report is not
        started here (:func:`serve` starts it).

    Returns
    -------
    dash.Dash
        The app; ``app.server`` is its Flask server.
    """
    _reset_global_callbacks()
    app = dash.Dash(
        "drawdown.dashboard",  # the package: pages import as drawdown.dashboard.pages.<name>
        use_pages=True,
        pages_folder=str(HERE / "pages"),
        assets_folder=str(HERE / "assets"),
        title="drawdown",
        update_title=None,  # type: ignore[arg-type]  # dash annotates str; its docstring (and code) take None
        serve_locally=True,  # no CDN: works offline, in a van, on a phone hotspot
        meta_tags=[{"name": "viewport", "content": "width=device-width, initial-scale=1"}],
    )
    app.server.config["DRAWDOWN_SOURCE"] = DataSource.from_context(ctx)
    if fleet is not None:
        from drawdown.dashboard.fleet_source import install_fleet_routes

        app.server.config["DRAWDOWN_FLEET"] = fleet
        install_fleet_routes(app.server, fleet)
    # Uploads travel base64-encoded inside a callback request; one too big for the limit is
    # refused on the System setup page in its own words, not with a bare 413 page.
    install_body_limit(app.server, callback_too_large=_upload_too_large_answer)
    if token is not None:
        install_token_guard(app.server, token)
    # Installed last so that it runs first: a foreign Host is refused before the token is asked for.
    install_host_guard(app.server, bound_host=host, check_host=is_loopback(host) or token is None)
    install_security_headers(app.server, script_hashes=app.csp_hashes, token_required=token is not None)
    app.layout = _shell
    app.callback(Output(ids.NAV, "children"), Input(ids.URL, "pathname"))(nav_links)
    return app


def _upload_too_large_answer(message: str) -> str:
    """A Dash callback answer that shows an upload's refusal in the System setup page's result box."""
    from dash._utils import to_json

    from drawdown.dashboard.pages._parts import notice

    box = notice(["Import failed. Nothing was stored.", message], kind="error")
    return to_json({"multi": True, "response": {ids.SETUP_UPLOAD_RESULT: {"children": box}}})


def resolve_token(host: str, token: str | None) -> str | None:
    """The token a server on ``host`` must enforce: the given one, a new one off loopback, else None."""
    if token is not None:
        return token
    if not is_loopback(host):
        return new_token()
    return None


def serve(ctx: Any, host: str = "127.0.0.1", port: int = 8050, token: str | None = None, *,
          on_listening: Any = None, fleet: Any = None) -> int:
    """Serve the dashboard until interrupted (used by ``drawdown serve`` and ``drawdown demo``).

    Parameters
    ----------
    host
        Interface to bind; loopback by default. Any other address requires a
        token: ``token`` or one generated here and printed on stderr.
    port
        TCP port.
    token
        Access token; enforced whenever given.
    on_listening
        Called with the dashboard's address (token included) once the port is bound.
    fleet
        A :class:`dashboard.fleet_source.FleetSource`: the Fleet page, whose report starts in a
        background thread before the port is bound (or is read from its cache); the printed
        address is then the Fleet page's.

    Returns
    -------
    int
        0 after a clean stop.
    """
    from werkzeug.serving import make_server

    given = token
    token = resolve_token(host, token)
    if token is not None and given is None:
        print(f"drawdown serve: bound to {host}, so every request needs this access token:\n  {token}",
              file=sys.stderr)
    app = create_app(ctx, token=token, host=host, fleet=fleet)
    try:
        server = make_server(host, port, app.server, threaded=True, request_handler=quiet_request_handler())
    except SystemExit:  # werkzeug exits 1 itself when the port is taken
        from drawdown.cli.context import UsageError

        raise UsageError(f"--port {port}: cannot listen on {host}:{port}, the port is in use by another "
                         f"program (another drawdown serve?); stop it or choose another, e.g. --port {port + 1}") from None
    except OSError as exc:
        from drawdown.cli.context import UsageError

        raise UsageError(f"cannot listen on {host}:{port} ({exc.strerror or exc}); "
                         f"is another dashboard running? Try --port {port + 1}.") from None
    shown = f"[{host}]" if ":" in host else host
    url = f"http://{shown}:{server.server_port}/" + ("fleet" if fleet is not None else "")
    if fleet is not None:
        fleet.ensure_report()  # in a background thread (or from the cache); the Fleet page shows how far it is
    print(f"drawdown dashboard: {url}{'?token=' + token if token else ''}  (Ctrl+C stops it)", file=sys.stderr)
    if on_listening is not None:
        on_listening(f"{url}{'?token=' + token if token else ''}")
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
    return 0
