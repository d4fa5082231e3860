"""System setup: view and edit system.toml (validated before it is written), import a log by upload.

Uploads are size-limited (``dashboard.security.MAX_UPLOAD_BYTES``), written to a
private temporary file, parsed as data by the same importer as
``drawdown import`` and deleted; nothing uploaded is ever executed.
"""

from __future__ import annotations

from typing import Any, cast

import dash
from dash import Input, Output, State, callback, dcc, html, no_update

from drawdown.dashboard import ids, labels
from drawdown.dashboard.data import DataSource, current, imports_table
from drawdown.dashboard.security import UPLOAD_LIMIT_TEXT
from drawdown.dashboard.pages._parts import fmt, notice, page_head, table

dash.register_page(__name__, path="/setup", name="System setup", title="drawdown - system setup", order=5)

#: Shown when no system.toml exists yet: the docs/contracts.md#system-description example, to edit.
EXAMPLE_SYSTEM = """\
[site]       # where the vehicle mostly is
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"

[battery]
chemistry = "lifepo4"          # lifepo4 | agm | gel | flooded
nominal_voltage_V = 12.8
rated_capacity_Ah = 200        # at rated_hours
rated_hours = 20
# Optional: the chemistry's defaults are used unless you set these.
# full_voltage_V = 14.0        # full when charging holds the bank at least this...
# full_current_pct = 5         # ...with the charge current at most this % of rated_capacity_Ah...
# full_hold_s = 120            # ...for this long: SoC is then set to 100 %
# max_dod = 0.8                # deepest planned discharge; the reserve is 1 - max_dod

[[solar]]
peak_power_W = 300
tilt_deg = 0                   # flat on a roof
azimuth_deg = 180
controller = "mppt"            # mppt | pwm

[[charger]]
source = "alternator"          # alternator | shore
max_current_A = 30
"""


def layout(**_kwargs: Any) -> html.Div:
    source = current()
    text = source.system_text()
    return html.Div([
        page_head("System setup", "Describe the bank, the array and the chargers; bring in a log."),
        *([notice(source.read_only, kind="info")] if source.read_only else []),  # a fleet vehicle: shown, not edited
        html.H2("System description"),
        html.P(f"File: {source.system_path.name}" + ("" if text is not None else " (not written yet: an example "
                                                "is shown; edit it and save)"), className="hint"),
        html.P("Check shows the full-charge settings and the reserve in use, with the chemistry's defaults "
               "for any you leave out.", className="hint"),
        dcc.Textarea(id=ids.SETUP_TEXT, value=text if text is not None else EXAMPLE_SYSTEM, className="toml",
                     spellCheck=False, rows=22),
        html.Div([html.Button("Check", id=ids.SETUP_VALIDATE, n_clicks=0, className="button"),
                  html.Button("Save", id=ids.SETUP_SAVE, n_clicks=0, className="button primary")],
                 className="buttons"),
        html.Div(id=ids.SETUP_MESSAGES, **cast("dict[str, Any]", {"aria-live": "polite"})),
        html.H2("Import a log"),
        # No max_size here: the browser would drop a bigger file without a word. The server
        # refuses it and this page says why (dashboard.security.install_body_limit).
        dcc.Upload(id=ids.SETUP_UPLOAD, multiple=False, className="upload",
                   children=html.Div(["Drop a log file here or ", html.Span("choose one", className="link"),
                                      html.Br(),
                                      html.Small(f"CSV or text export of your monitor, up to "
                                                 f"{UPLOAD_LIMIT_TEXT}")])),
        dcc.Loading(html.Div(id=ids.SETUP_UPLOAD_RESULT, **cast("dict[str, Any]", {"aria-live": "polite"})), type="dot"),
        html.H2("What the store holds"),
        html.Div(id=ids.SETUP_STORE_TABLE, children=store_view(source)),
    ])


def store_view(source: DataSource) -> Any:
    """Per channel: readings, first and last; then the imported files."""
    channels = source.channel_summary()
    if not channels:
        return html.P(f"The store ({source.store_path.name}) holds no readings yet.")
    tz = source.timezone()
    rows = [{"channel": name, "rows": f"{c['rows']:,}", "first": labels.local_time(c["first"], tz),
             "last": labels.local_time(c["last"], tz)} for name, c in channels.items()]
    parts = [table(rows, [("channel", "Channel"), ("rows", "Readings"), ("first", "First"),
                          ("last", "Last")], numeric=["rows"]),
             html.P(f"Times are local ({tz}).", className="hint")]
    imp = imports_table(source.imports())
    if imp:
        parts.append(table([{**r, "rows_stored": f"{r['rows_stored']:,}", "rows_rejected": f"{r['rows_rejected']:,}",
                             "imported_at": labels.local_time(r["imported_at"], tz)} for r in imp],
                           [("file", "File"), ("rows_stored", "Lines stored"), ("rows_rejected", "Lines rejected"),
                            ("imported_at", "Imported")], numeric=["rows_stored", "rows_rejected"]))
    return html.Div(parts)


def render_system_action(source: DataSource, action: str | None, text: str | None) -> Any:
    """'check' validates only; 'save' validates and writes when valid."""
    if not action:
        return no_update
    if not text or not text.strip():
        return notice("The system description is empty.", kind="error")
    if action == "save":
        saved, message = source.save_system_text(text)
        return notice(message.splitlines(), kind="info" if saved else "error")
    system, message = source.validate_system_text(text, source=source.system_path.name)
    return notice(message.splitlines(), kind="info" if system is not None else "error")


@callback(
    Output(ids.SETUP_MESSAGES, "children"),
    Input(ids.SETUP_VALIDATE, "n_clicks"),
    Input(ids.SETUP_SAVE, "n_clicks"),
    State(ids.SETUP_TEXT, "value"),
    prevent_initial_call=True,
)
def system_action(_check: int, _save: int, text: str | None) -> Any:
    action = {ids.SETUP_VALIDATE: "check", ids.SETUP_SAVE: "save"}.get(dash.ctx.triggered_id)
    return render_system_action(current(), action, text)


def render_upload(source: DataSource, contents: str | None, filename: str | None) -> tuple[Any, Any]:
    """(result message, refreshed store table) after an upload."""
    if not contents:
        return no_update, no_update
    out = source.import_upload(filename or "upload.csv", contents)
    if not out["ok"]:
        return notice(["Import failed. Nothing was stored.", out["error"]], kind="error"), no_update
    s = out["summary"]
    files = s.get("files") or [s]
    parts: list[Any] = []
    for f in files:
        lines = [f"{filename}: {f.get('rows_stored', 0):,} lines stored, {f.get('rows_rejected', 0):,} rejected."]
        if f.get("already_imported"):
            lines.append("This file was imported before; nothing new was stored.")
        reasons = f.get("rejected_by_reason") or {}
        if reasons:
            lines.append("Rejected: " + ", ".join(f"{k.replace('_', ' ')} {v:,}" for k, v in reasons.items()))
        if f.get("channels"):
            lines.append("Channels: " + ", ".join(f["channels"]))
        if f.get("sign_inverted"):
            lines.append("Current sign flipped (it was reversed in the file) for: " + ", ".join(f["sign_inverted"]))
        if f.get("sample_interval_s"):
            lines.append(f"One reading every {fmt(f['sample_interval_s'], 's', 0)}.")
        gaps = f.get("gaps") or []
        if gaps:
            lines.append(f"{labels.plural(int(f.get('gaps_total', len(gaps))), 'gap')} in the log.")
        if f.get("timezone_assumed"):
            lines.append(f"Times without an offset were read as {f.get('timezone_used') or 'UTC'}.")
        if f.get("quarantine"):
            lines.append("The rejected lines are kept, with line number and reason, in the store's "
                         "quarantine folder.")
        parts.append(notice(lines, kind="info"))
    return html.Div(parts), store_view(source)


@callback(
    Output(ids.SETUP_UPLOAD_RESULT, "children"),
    Output(ids.SETUP_STORE_TABLE, "children"),
    Input(ids.SETUP_UPLOAD, "contents"),
    State(ids.SETUP_UPLOAD, "filename"),
    prevent_initial_call=True,
)
def upload(contents: str | None, filename: str | None) -> tuple[Any, Any]:
    return render_upload(current(), contents, filename)
