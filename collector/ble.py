"""Bluetooth LE source (bleak): notifications of standard and user-described characteristics.

``drawdown collect --ble ADDRESS`` connects to the device, subscribes to the
notifications of every characteristic it knows -- the standard ones of
:mod:`collector.gatt` and those described in ``system.toml`` ``[ble]`` -- and
stores each notification as a reading (time of arrival on the host clock).
Decoding is the pure :func:`decode_notification`; this module only manages the
connection: on a drop it reconnects with backoff (capped at 2 s) and reports
the time away as a gap.

A computer without a Bluetooth stack makes bleak raise ``FileNotFoundError``
(no D-Bus system socket), ``BleakDBusError`` (no BlueZ service) or
``BleakBluetoothNotAvailableError`` (no adapter); those become
:class:`collector.source.SourceUnavailable` naming what is missing, and the
command line exits 2.
"""

from __future__ import annotations

import asyncio
import math
import threading
from collections.abc import Callable
from typing import Any

from drawdown.collector import gatt
from drawdown.collector.clock import HostClock
from drawdown.collector.source import NAN, Backoff, Reading, Sink, Source, SourceUnavailable

Layouts = dict[str, tuple[str, list[gatt.FieldLayout]]]
_MISSING_STACK = (
    "Bluetooth is not available on this computer: {what}. Install and start BlueZ "
    "(Debian: apt install bluez; systemctl start bluetooth), make sure an adapter is present "
    "(bluetoothctl list) and that this user may use it; or collect with --serial / --mqtt instead.")


def decode_notification(uuid: str, data: bytes, *, channel: str, layouts: Layouts, t_s: float,
                        last_voltage_V: float | None = None) -> tuple[Reading | None, bool]:
    """One notification as a reading (None when nothing is known), and 'direction unknown'.

    A user layout for the UUID wins over the standard decoding. Power without
    current becomes ``current_A = power_W / voltage_V`` with the voltage in the
    same value or the channel's last voltage (``last_voltage_V``).

    Raises
    ------
    gatt.GattError
        The value is shorter than its format, or the UUID is unknown.
    """
    key = gatt.normalise_uuid(uuid)
    if key in layouts:
        ch, fields = layouts[key]
        d = gatt.decode_layout(data, fields)
    else:
        ch = channel
        d = gatt.decode_standard(key, data, channel=channel)
    v = d.voltage_V
    i = d.current_A
    if i is None and d.power_W is not None:
        volts = v if v is not None else last_voltage_V
        if volts is not None and volts > 0:
            i = d.power_W / volts
    r = Reading(t_s, ch,
                NAN if v is None else v, NAN if i is None else i,
                NAN if d.temperature_C is None else d.temperature_C,
                NAN if d.soc_pct is None else d.soc_pct, True)
    return (r if r.has_values() else None), d.direction_unknown


def _missing_stack(exc: BaseException) -> str | None:
    """What is missing when ``exc`` says the Bluetooth stack is absent, else None."""
    name = type(exc).__name__
    text = str(exc)
    if isinstance(exc, FileNotFoundError):
        return "no D-Bus system bus socket (is dbus running?)"
    if name == "BleakDBusError" and ("ServiceUnknown" in text or "org.bluez" in text and "NotReady" in text):
        return f"the BlueZ service is not running or not ready ({text})"
    if name == "BleakBluetoothNotAvailableError" or "No Bluetooth adapters" in text or "adapter" in text.lower():
        return f"no Bluetooth adapter ({text})"
    if isinstance(exc, PermissionError):
        return f"no permission to use D-Bus/Bluetooth ({text})"
    return None


class BleSource(Source):
    """Notifications from one Bluetooth LE device.

    Parameters
    ----------
    address
        The device's address (``AA:BB:CC:DD:EE:FF``) or, on macOS, its UUID.
    channel
        Channel for standard characteristics.
    layouts
        User layouts by UUID (:func:`collector.gatt.layouts_from_system`).
    client_factory
        Builds the client (``bleak.BleakClient`` by default); the tests pass a
        stand-in because this machine has no Bluetooth adapter.
    """

    name = "ble"

    def __init__(self, address: str, *, channel: str = "battery", layouts: Layouts | None = None,
                 clock: HostClock | None = None, backoff: Backoff | None = None,
                 client_factory: Callable[..., Any] | None = None, connect_timeout_s: float = 10.0):
        self.address = address
        self.channel = channel
        self.layouts = layouts or {}
        self.clock = clock or HostClock()
        self.backoff = backoff or Backoff(first_s=0.5, cap_s=2.0)
        self.client_factory = client_factory
        self.connect_timeout_s = connect_timeout_s
        self._last_voltage: dict[str, float] = {}
        self._warned_direction = False
        self.connected = threading.Event()

    def on_notify(self, uuid: str, data: bytes, sink: Sink) -> None:
        """The notification callback: decode, remember the voltage, deliver."""
        now = self.clock.now()
        try:
            reading, unknown = decode_notification(
                uuid, bytes(data), channel=self.channel, layouts=self.layouts, t_s=now,
                last_voltage_V=self._last_voltage.get(self.channel))
        except gatt.GattError as exc:
            sink.reject(f"{uuid} {bytes(data).hex()}", str(exc), now)
            return
        if unknown and not self._warned_direction:
            self._warned_direction = True
            sink.note(f"ble: {uuid} gives an unsigned current/power; its direction is unknown on channel "
                      f"{self.channel!r}, so it is not stored. Use --channel solar/alternator/shore/load or "
                      "describe a signed layout in system.toml [ble].")
        if reading is None:
            return
        if not math.isnan(reading.voltage_V):
            self._last_voltage[reading.channel] = reading.voltage_V
        sink.put([reading])

    def run(self, sink: Sink, stop: threading.Event) -> None:
        asyncio.run(self._main(sink, stop))

    def _factory(self) -> Callable[..., Any]:
        if self.client_factory is not None:
            return self.client_factory
        try:
            from bleak import BleakClient
        except ImportError as exc:
            raise SourceUnavailable("Bluetooth LE needs the optional 'ble' extra: pip install 'drawdown[ble]'"
                                    " (it installs bleak)") from exc
        return BleakClient

    async def _main(self, sink: Sink, stop: threading.Event) -> None:
        try:
            from bleak.exc import BleakError
        except ImportError:  # pragma: no cover - only without bleak and with a stand-in client
            BleakError = RuntimeError  # type: ignore[misc,assignment]  # noqa: N806
        factory = self._factory()
        lost_at: float | None = None
        lost_reason = ""
        while not stop.is_set():
            disconnected = asyncio.Event()
            loop = asyncio.get_running_loop()

            def on_disconnect(_client: Any) -> None:
                loop.call_soon_threadsafe(disconnected.set)

            client = factory(self.address, disconnected_callback=on_disconnect, timeout=self.connect_timeout_s)
            try:
                await client.connect()
                wanted = set(gatt.STANDARD) | set(self.layouts)
                subscribed = []
                for service in client.services:
                    for char in service.characteristics:
                        uuid = gatt.normalise_uuid(char.uuid)
                        if uuid in wanted and ("notify" in char.properties or "indicate" in char.properties):
                            await client.start_notify(
                                char, lambda c, data, u=uuid: self.on_notify(u, data, sink))
                            subscribed.append(uuid)
                if not subscribed:
                    raise SourceUnavailable(
                        f"ble: {self.address} offers no notifying characteristic drawdown decodes "
                        f"({', '.join(gatt.STANDARD.values())} or a system.toml [ble] layout)")
                now = self.clock.now()
                if lost_at is not None:
                    sink.outage(lost_at, now, lost_reason)
                    lost_at = None
                self.backoff.reset()
                self.connected.set()
                sink.note(f"ble: connected to {self.address}, {len(subscribed)} characteristics")
                while not stop.is_set() and not disconnected.is_set():
                    await asyncio.sleep(0.2)
                if disconnected.is_set() and not stop.is_set():
                    lost_at, lost_reason = self.clock.now(), f"ble {self.address} disconnected"
                    sink.note(f"ble: {lost_reason}; reconnecting")
            except SourceUnavailable:
                raise
            except (OSError, BleakError, asyncio.TimeoutError) as exc:
                what = _missing_stack(exc)
                if what is not None:
                    raise SourceUnavailable(_MISSING_STACK.format(what=what)) from exc
                if lost_at is None:
                    lost_at, lost_reason = self.clock.now(), f"ble {self.address}: {exc}"
                sink.note(f"ble: cannot reach {self.address} ({type(exc).__name__}: {exc}); retrying")
            finally:
                self.connected.clear()
                try:
                    await client.disconnect()
                except Exception:  # noqa: BLE001 - best effort on a link that is already gone
                    pass
            if stop.is_set():
                break
            await asyncio.sleep(self.backoff.next_delay())
        if lost_at is not None:
            sink.outage(lost_at, self.clock.now(), lost_reason + " (still disconnected when stopped)")
