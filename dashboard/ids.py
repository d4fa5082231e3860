"""Every component id of the dashboard, in one place.

Pages and callbacks import these names instead of spelling ids as strings, so
a typo is a NameError at import time rather than a callback that silently
never fires. Ids are prefixed by page (``live-``, ``trip-`` ...) because Dash
needs them unique across every page of the app (the validation layout holds
all pages at once).
"""

from __future__ import annotations

# -- app shell (present on every page) ---------------------------------------
URL = "app-url"
RANGE_STORE = "app-range-store"  # dcc.Store: {"start": "YYYY-MM-DD", "end": "YYYY-MM-DD"} shared by pages
NAV = "app-nav"
VEHICLE_BAR = "app-vehicle-bar"  # served with a fleet dataset: the vehicle these pages show

# -- live view -----------------------------------------------------------------
LIVE_INTERVAL = "live-interval"
LIVE_TILES = "live-tiles"
LIVE_ALARM = "live-alarm"
LIVE_RUNTIME = "live-runtime"
LIVE_GRAPH = "live-graph"
LIVE_STAMP = "live-stamp"

# -- trip review ---------------------------------------------------------------
TRIP_RANGE = "trip-range"
TRIP_LEDGER_GRAPH = "trip-ledger-graph"
TRIP_SOC_GRAPH = "trip-soc-graph"
TRIP_READINGS_GRAPH = "trip-readings-graph"
TRIP_DAYS_TABLE = "trip-days-table"
TRIP_QUALITY = "trip-quality"
TRIP_SUMMARY = "trip-summary"

# -- battery health ------------------------------------------------------------
HEALTH_SUMMARY = "health-summary"
HEALTH_CAPACITY_GRAPH = "health-capacity-graph"
HEALTH_RESISTANCE_GRAPH = "health-resistance-graph"
HEALTH_PEUKERT_GRAPH = "health-peukert-graph"
HEALTH_TRIGGER = "health-trigger"

# -- solar -----------------------------------------------------------------------
SOLAR_SUMMARY = "solar-summary"
SOLAR_DAILY_GRAPH = "solar-daily-graph"
SOLAR_POWER_GRAPH = "solar-power-graph"
SOLAR_DIAGNOSTICS = "solar-diagnostics"
SOLAR_TRIGGER = "solar-trigger"

# -- upgrade planner ---------------------------------------------------------------
PLAN_AUTONOMY = "plan-autonomy-days"
PLAN_PERCENTILE = "plan-percentile"
PLAN_RESULT = "plan-result"
PLAN_RUNS_TABLE = "plan-runs-table"
PLAN_AUTONOMY_GRAPH = "plan-autonomy-graph"
PLAN_CAUTIONS = "plan-cautions"

# -- system setup ----------------------------------------------------------------
SETUP_TEXT = "setup-system-text"
SETUP_VALIDATE = "setup-validate"
SETUP_SAVE = "setup-save"
SETUP_MESSAGES = "setup-messages"
SETUP_UPLOAD = "setup-upload"
SETUP_UPLOAD_RESULT = "setup-upload-result"
SETUP_STORE_TABLE = "setup-store-table"

# -- fleet (drawdown serve --dataset) ---------------------------------------------
FLEET_BODY = "fleet-body"
FLEET_INTERVAL = "fleet-interval"
FLEET_TABLE = "fleet-table"
