"""Shared test set-up: keep every test away from the user's real data folder."""

from __future__ import annotations

import os

import pytest

os.environ.setdefault("PYBAMM_DISABLE_TELEMETRY", "true")
os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture(autouse=True)
def _isolated_default_store(tmp_path_factory, monkeypatch):
    """A command run without --store must never write to ~/.local/share."""
    monkeypatch.setenv("DRAWDOWN_STORE", str(tmp_path_factory.mktemp("default-store") / "readings.sqlite"))
