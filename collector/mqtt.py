"""MQTT source (paho-mqtt): JSON readings and Signal K deltas from a broker.

``drawdown collect --mqtt mqtt://[user:pass@]host[:port] [--topic FILTER]...``
(``mqtts://`` for TLS; port 1883 / 8883 by default; topic ``#`` by default).

Payloads understood, per message:

* a Signal K delta (an object with ``updates``), see :mod:`collector.signalk`;
* a JSON reading object, parsed exactly like a ``jsonl`` serial line
  (:class:`collector.lines.JsonLinesParser`): ``{"voltage_V": 13.1,
  "current_A": -4.2}``, optional ``channel`` and time; without a ``channel``
  key, a topic level naming a channel (``van/solar``) gives it, else
  ``--channel``;
* a bare number on a topic whose last level names the quantity
  (``van/solar/current_A`` -> channel ``solar``, or the default channel when the
  level before is not a channel word).

Anything else is counted and quarantined (``collect-mqtt.csv``, the topic in
the text). Drops are handled by paho's reconnect loop (1 s doubling to 2 s);
the time from a disconnect to the next connect is reported as a gap.
"""

from __future__ import annotations

import json
import threading
from urllib.parse import unquote, urlsplit

from drawdown.collector.clock import HostClock
from drawdown.collector.columns import classify_column, normalise_channel
from drawdown.collector.lines import JsonLinesParser, LineError, classify_key
from drawdown.collector.signalk import delta_to_readings, is_delta
from drawdown.collector.source import Reading, Sink, Source, SourceUnavailable

_NOT_YET = "mqtt broker not reachable at start"
_CHANNEL_WORDS = {"battery", "solar", "alternator", "shore", "load"}


def parse_url(url: str) -> dict:
    """Host, port, credentials and TLS flag of an ``mqtt://`` URL.

    Raises
    ------
    ValueError
        Naming the URL and the expected form.
    """
    parts = urlsplit(url)
    if parts.scheme not in ("mqtt", "mqtts", "tcp", "ssl") or not parts.hostname:
        raise ValueError(f"--mqtt {url!r}: expected mqtt://[user:pass@]host[:port] (or mqtts:// for TLS)")
    tls = parts.scheme in ("mqtts", "ssl")
    try:
        port = parts.port or (8883 if tls else 1883)
    except ValueError:
        raise ValueError(f"--mqtt {url!r}: the port is not a number") from None
    return {"host": parts.hostname, "port": port, "tls": tls,
            "username": unquote(parts.username) if parts.username else None,
            "password": unquote(parts.password) if parts.password else None}


class MqttSource(Source):
    """Subscribe to topics on an MQTT broker and deliver readings.

    Parameters
    ----------
    url
        ``mqtt://[user:pass@]host[:port]``.
    topics
        Topic filters (default ``['#']``).
    channel
        Channel for JSON readings that name none.
    """

    name = "mqtt"

    def __init__(self, url: str, *, topics: list[str] | None = None, channel: str = "battery",
                 clock: HostClock | None = None, keepalive_s: int = 15, client_id: str | None = None):
        self.conf = parse_url(url)
        self.url = url
        self.topics = topics or ["#"]
        self.channel = normalise_channel(channel)
        self.clock = clock or HostClock()
        self.keepalive_s = keepalive_s
        self.client_id = client_id or ""
        self._json_by_channel: dict[str, JsonLinesParser] = {}
        self.connected = threading.Event()
        self._lost_at: float | None = None
        self._lost_reason = ""

    # -- payloads (pure enough to test without a broker) ----------------------
    def handle(self, topic: str, payload: bytes, sink: Sink) -> None:
        """Decode one message and send its readings / rejects to ``sink``."""
        now = self.clock.now()
        try:
            text = payload.decode("utf-8").strip()
        except UnicodeDecodeError:
            sink.reject(f"{topic} {payload[:100]!r}", "payload is not UTF-8 text", now)
            return
        try:
            obj = json.loads(text)
        except ValueError:
            sink.reject(f"{topic} {text[:300]}", "payload is not JSON", now)
            return
        if is_delta(obj):
            readings, problems = delta_to_readings(obj, t_host_s=now)
            for p in problems:
                sink.reject(f"{topic} {text[:300]}", p, now)
            if readings:
                sink.put(readings)
            return
        if isinstance(obj, dict):
            try:
                readings = self._json_for(topic).parse(text, now)
            except LineError as exc:
                sink.reject(f"{topic} {text[:300]}", str(exc), now)
                return
            sink.put(readings)
            return
        if isinstance(obj, (int, float)) and not isinstance(obj, bool):
            reading = self._topic_value(topic, float(obj), now)
            if reading is None:
                sink.reject(f"{topic} {text[:100]}", "a bare number on a topic that names no quantity", now)
            else:
                sink.put([reading])
            return
        sink.reject(f"{topic} {text[:300]}", "JSON that is neither a reading object nor a Signal K delta", now)

    def _json_for(self, topic: str) -> JsonLinesParser:
        """The JSON parser whose default channel is the topic's channel level, if it has one."""
        levels = [lv.lower() for lv in topic.split("/") if lv]
        channel = next((lv for lv in reversed(levels) if lv in _CHANNEL_WORDS), self.channel)
        parser = self._json_by_channel.get(channel)
        if parser is None:
            parser = self._json_by_channel[channel] = JsonLinesParser(channel=channel)
        return parser

    def _topic_value(self, topic: str, value: float, now: float) -> Reading | None:
        levels = [lv for lv in topic.split("/") if lv]
        if not levels:
            return None
        spec = classify_key(levels[-1])
        if spec is None or spec.quantity in ("time", "ignore", "power_W"):
            return None
        channel = spec.channel
        if channel is None and len(levels) >= 2:
            prev = classify_column(f"{levels[-2]} {spec.quantity}")
            if levels[-2].lower() in _CHANNEL_WORDS:
                channel = levels[-2].lower()
            elif prev is not None and prev.channel is not None:
                channel = prev.channel
        r = Reading(now, channel or self.channel)
        setattr(r, spec.quantity, value * spec.scale)
        return r

    # -- the connection --------------------------------------------------------
    def run(self, sink: Sink, stop: threading.Event) -> None:
        try:
            import paho.mqtt.client as mqtt
        except ImportError as exc:  # pragma: no cover - paho is a core dependency
            raise SourceUnavailable("MQTT needs the paho-mqtt package: pip install paho-mqtt") from exc

        client = mqtt.Client(callback_api_version=mqtt.CallbackAPIVersion.VERSION2,
                             client_id=self.client_id, clean_session=True)
        if self.conf["username"]:
            client.username_pw_set(self.conf["username"], self.conf["password"])
        if self.conf["tls"]:
            client.tls_set()
        client.reconnect_delay_set(min_delay=1, max_delay=2)

        def on_connect(c, userdata, flags, reason_code, properties=None):
            if getattr(reason_code, "is_failure", False):
                sink.note(f"mqtt: broker refused the connection ({reason_code}); check the URL and credentials")
                return
            for t in self.topics:
                c.subscribe(t, qos=0)
            now = self.clock.now()
            if self._lost_at is not None and (self._lost_reason != _NOT_YET or now - self._lost_at > 1.0):
                sink.outage(self._lost_at, now, self._lost_reason)
            self._lost_at = None
            self.connected.set()
            sink.note(f"mqtt: connected to {self.conf['host']}:{self.conf['port']}, topics {self.topics}")

        def on_disconnect(c, userdata, flags, reason_code, properties=None):
            self.connected.clear()
            if self._lost_at is None and not stop.is_set():
                self._lost_at = self.clock.now()
                self._lost_reason = f"mqtt broker {self.conf['host']}:{self.conf['port']} disconnected ({reason_code})"
                sink.note(f"mqtt: {self._lost_reason}; reconnecting")

        def on_message(c, userdata, msg):
            try:
                self.handle(msg.topic, msg.payload, sink)
            except Exception as exc:  # noqa: BLE001 - one bad message must never stop a week-long run
                sink.reject(f"{msg.topic} {msg.payload[:200]!r}", f"could not be decoded ({exc})", self.clock.now())

        client.on_connect = on_connect
        client.on_disconnect = on_disconnect
        client.on_message = on_message
        self._lost_at = self.clock.now()
        self._lost_reason = _NOT_YET
        client.connect_async(self.conf["host"], self.conf["port"], keepalive=self.keepalive_s)
        client.loop_start()
        try:
            stop.wait()
        finally:
            client.disconnect()
            client.loop_stop()
        if self._lost_at is not None:
            sink.outage(self._lost_at, self.clock.now(), self._lost_reason + " (still disconnected when stopped)")
