"""The Bluetooth LE source, as far as this machine allows.

This machine has no Bluetooth adapter and no D-Bus system bus, so:

* the real bleak path is exercised up to where it fails -- the command line
  must exit 2 and say what is missing (test below, no mock);
* the connection/notification/reconnect path runs against a stand-in client
  (a mock: no real part can run here), which calls the notification callback
  with GSS-format byte strings the way bleak would.
"""

from __future__ import annotations

import asyncio
import subprocess
import threading

import pytest

from conftest_collector import collector_cmd, ROOT, wait_for
from drawdown.collector import gatt
from drawdown.collector.ble import BleSource, decode_notification
from drawdown.collector.source import Backoff, ListSink, SourceUnavailable


def test_collect_ble_without_a_bluetooth_stack_exits_2_saying_what_is_missing(tmp_path):
    """Real bleak, real (absent) BlueZ: FileNotFoundError / BleakDBusError become a clear message."""
    proc = subprocess.run(collector_cmd(tmp_path / "s.sqlite", "--ble", "AA:BB:CC:DD:EE:FF", "--duration", "20"),
                          cwd=ROOT, capture_output=True, text=True, timeout=60)
    if proc.returncode == 0:
        pytest.skip("this machine has a working Bluetooth stack; the missing-stack path cannot be shown")
    assert proc.returncode == 2, proc.stderr
    assert "Bluetooth is not available on this computer" in proc.stderr
    assert "BlueZ" in proc.stderr


def test_decode_notification_standard_voltage_then_power_becomes_current_on_solar():
    r, _ = decode_notification(gatt.VOLTAGE, bytes.fromhex("3603"), channel="solar", layouts={}, t_s=1.0)
    assert r.voltage_V == 12.84375
    # GSS Power D2 04 00 = 123.4 W; with the last voltage 12.84375 V -> 9.608 A delivered
    r, _ = decode_notification(gatt.POWER, bytes.fromhex("D20400"), channel="solar", layouts={}, t_s=2.0,
                               last_voltage_V=12.84375)
    assert r.current_A == pytest.approx(123.4 / 12.84375)


class _Char:
    def __init__(self, uuid: str, props=("notify",)):
        self.uuid = uuid
        self.properties = list(props)


class _Service:
    def __init__(self, chars):
        self.characteristics = chars


class FakeClient:
    """Stand-in for bleak.BleakClient (MOCK: there is no Bluetooth adapter here).

    Offers Voltage, Temperature and Battery Level with notify; after connecting
    it sends GSS-format values through the callback bleak would call, then, on
    the first connection only, drops the link to exercise reconnection.
    """

    connections = 0

    def __init__(self, address, disconnected_callback=None, timeout=10.0):
        self.address = address
        self.cb = disconnected_callback
        self.services = [_Service([_Char("00002b18-0000-1000-8000-00805f9b34fb"),
                                   _Char("00002a6e-0000-1000-8000-00805f9b34fb"),
                                   _Char("00002a19-0000-1000-8000-00805f9b34fb"),
                                   _Char("00002a00-0000-1000-8000-00805f9b34fb", ("read",))])]
        self.handlers = {}

    async def connect(self):
        FakeClient.connections += 1

    async def start_notify(self, char, handler):
        self.handlers[char.uuid] = handler
        if len(self.handlers) == 3:
            asyncio.get_running_loop().call_later(0.05, self._send)

    def _send(self):
        self.handlers["00002b18-0000-1000-8000-00805f9b34fb"](None, bytearray.fromhex("3603"))
        self.handlers["00002a6e-0000-1000-8000-00805f9b34fb"](None, bytearray.fromhex("30F8"))
        self.handlers["00002a19-0000-1000-8000-00805f9b34fb"](None, bytearray([87]))
        self.handlers["00002b18-0000-1000-8000-00805f9b34fb"](None, bytearray.fromhex("36"))  # too short
        if FakeClient.connections == 1 and self.cb is not None:
            asyncio.get_running_loop().call_later(0.05, self.cb, self)

    async def disconnect(self):
        pass


def test_ble_source_decodes_notifications_and_reconnects_after_a_drop():
    FakeClient.connections = 0
    src = BleSource("AA:BB:CC:DD:EE:FF", client_factory=FakeClient, backoff=Backoff(first_s=0.05, cap_s=0.1))
    sink = ListSink()
    stop = threading.Event()
    th = threading.Thread(target=src.run, args=(sink, stop), daemon=True)
    th.start()
    assert wait_for(lambda: FakeClient.connections >= 2 and len(sink.readings) >= 6, 5.0)
    stop.set()
    th.join(5)
    first = sink.readings[:3]
    assert first[0].voltage_V == 12.84375
    assert first[1].temperature_C == pytest.approx(-20.0)
    assert first[2].soc_pct == 87.0
    assert len(sink.outages) == 1 and "disconnected" in sink.outages[0][2]
    assert any("needs 2" in reason for _, reason, _ in sink.rejects)


def test_ble_source_without_a_stack_raises_source_unavailable():
    class NoStack:
        def __init__(self, *a, **k):
            pass

        async def connect(self):
            raise FileNotFoundError(2, "No such file or directory")

        async def disconnect(self):
            pass

    src = BleSource("AA:BB:CC:DD:EE:FF", client_factory=NoStack)
    with pytest.raises(SourceUnavailable, match="no D-Bus system bus socket"):
        src.run(ListSink(), threading.Event())
