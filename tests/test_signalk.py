"""Signal K delta decoding.

Reference: Signal K specification (schemas/groups/electrical.json, data_model.md),
via docs/standards.md#signal-k: SI units (temperature in K, state of charge as a ratio),
current positive when charging (spec PR #651), the delta example below.
"""

from __future__ import annotations

import math

import pytest

from drawdown.collector.signalk import SignalKError, channel_for, delta_to_readings

# docs/standards.md#signal-k delta example
DELTA = {"context": "vessels.self", "updates": [{"source": {"label": "x"}, "timestamp": "2024-06-21T12:00:00Z",
         "values": [{"path": "electrical.batteries.house.voltage", "value": 13.28},
                    {"path": "electrical.batteries.house.current", "value": -4.2},
                    {"path": "electrical.batteries.house.capacity.stateOfCharge", "value": 0.87}]}]}


def test_docs_delta_gives_one_battery_reading_at_its_timestamp():
    readings, problems = delta_to_readings(DELTA, t_host_s=0.0)
    assert problems == []
    (r,) = readings
    assert r.channel == "battery"
    assert r.t_s == 1718971200.0  # 2024-06-21T12:00:00Z
    assert not r.host_stamped
    assert (r.voltage_V, r.current_A) == (13.28, -4.2)
    assert r.soc_pct == pytest.approx(87.0)  # ratio 0.87 -> 87 %
    assert math.isnan(r.temperature_C)


def test_temperature_in_kelvin_becomes_celsius():
    # docs/standards.md#signal-k: 18.5 degC = 291.65 K
    msg = {"updates": [{"values": [{"path": "electrical.batteries.house.temperature", "value": 291.65}]}]}
    (r,), _ = delta_to_readings(msg, t_host_s=1.767e9)
    assert r.temperature_C == pytest.approx(18.5)
    assert r.host_stamped and r.t_s == 1.767e9  # no timestamp: the host clock


def test_other_battery_ids_and_solar_get_their_own_channels():
    assert channel_for("batteries", "starter") == "starter"
    assert channel_for("batteries", "0") == "battery"
    assert channel_for("solar", "1") == "solar"
    assert channel_for("alternators", "port") == "alternator_port"


def test_paths_we_do_not_store_are_skipped_silently():
    msg = {"updates": [{"values": [{"path": "navigation.speedOverGround", "value": 3.1},
                                   {"path": "electrical.batteries.house.capacity.nominal", "value": 4.6e6}]}]}
    assert delta_to_readings(msg, t_host_s=1.0) == ([], [])


def test_a_non_numeric_value_is_reported_not_fatal():
    msg = {"updates": [{"values": [{"path": "electrical.batteries.house.voltage", "value": "high"},
                                   {"path": "electrical.batteries.house.current", "value": 2.0}]}]}
    readings, problems = delta_to_readings(msg, t_host_s=1.0)
    assert readings[0].current_A == 2.0
    assert "not a number" in problems[0]


def test_other_vessels_are_ignored():
    msg = dict(DELTA, context="vessels.urn:mrn:imo:mmsi:230099999")
    assert delta_to_readings(msg, t_host_s=1.0) == ([], [])


def test_a_message_without_updates_is_not_a_delta():
    with pytest.raises(SignalKError, match="not a Signal K delta"):
        delta_to_readings({"values": []}, t_host_s=1.0)
