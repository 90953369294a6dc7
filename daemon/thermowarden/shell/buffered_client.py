"""paho's MQTT client, reading the socket in large chunks and decoding plain messages itself.

Stock paho-mqtt 2.x reads one incoming packet per turn of its loop, and each with three
``recv()`` calls (the command byte, the remaining length, the body) after a ``select()``;
under MQTT 5 it then builds an empty ``Properties`` object for every message (some thirty
attribute probes), formats a debug line, and gives each received message an outgoing
message's delivery tracker (a lock and a condition). On a small machine that is nearly all
of what receiving a sensor message costs (about 60 us under MQTT 5 and 30 us under 3.1.1
here, against about 6 us with this class).

:class:`BufferedClient` changes only that: ``recv()`` takes up to :data:`READ_CHUNK` bytes
at once; a packet whole in that buffer is cut out of it in one step (a partial one is left
to paho's own reader); one turn of the loop handles every complete packet received (at most
:data:`MAX_PACKETS_PER_TURN`, so keep-alive pings and outgoing packets still get their turn
under a flood); a QoS 0 or 1 PUBLISH without MQTT 5 properties is decoded here into a
:class:`Received` (anything else, including malformed packets, by paho). Callbacks, their
locks, acknowledgements and error handling are paho's.

A PUBLISH whose remaining length is over :attr:`BufferedClient.max_publish_bytes` is never
held whole: its fixed header is read here, then its bytes are read off the socket in
:data:`READ_CHUNK` pieces and dropped, keeping only the first :data:`HEAD_KEPT` bytes (the
topic and packet id); it is acknowledged as paho would and given to ``on_message`` as an
:class:`Oversized` message with an empty payload and its size. So a 50 MB message costs
about 130 KiB of memory, not 50 MB (paho alone reads every packet whole into memory).

It overrides private methods of paho 2.x (``_sock_recv``, ``_packet_read``, ``_loop``,
``_handle_publish``, ``_handle_on_message``); tests/shell/test_buffered_client.py compares
what it receives with stock paho through the real broker (both protocols, large messages,
properties, retained) and reads a byte stream cut at every offset, so a paho release that
changes them fails there first.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import paho.mqtt.client as mqtt
from paho.mqtt.enums import MQTTErrorCode
from paho.mqtt.exception import MalformedPacket
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

READ_CHUNK = 65_536
"""Bytes asked of the socket per ``recv()``."""
MAX_PACKETS_PER_TURN = 1000
"""Packets handled per turn of the network loop before it writes and checks keep-alive."""
HEAD_KEPT = 2 + 65_535 + 2
"""Bytes kept of an oversized PUBLISH: the topic's length, the longest topic, a packet id."""
SKIP_CHUNKS_PER_TURN = 128
"""Pieces of an oversized message dropped per turn of the loop (8 MiB), so keep-alive and
outgoing packets still get their turn."""
_NO_PROPERTIES = Properties(PacketTypes.PUBLISH)  # type: ignore[no-untyped-call]
"""The properties of every MQTT 5 message that has none (shared, never changed)."""


class Received(mqtt.MQTTMessage):
    """A received message as paho gives it, without the delivery tracker
    (``MQTTMessageInfo``, a lock and a condition) that only outgoing messages use."""

    info = None  # type: ignore[assignment]

    def __init__(self, mid: int, topic: bytes, payload: bytes, qos: int, retain: bool,
                 dup: bool, properties: Properties | None) -> None:
        # paho's __init__ is not called on purpose: it builds the tracker
        self.timestamp = mqtt.time_func()
        self.state = mqtt.mqtt_ms_invalid
        self.dup = dup
        self.mid = mid
        self._topic = topic
        self.payload = payload
        self.qos = qos
        self.retain = retain
        self.properties = properties


class Oversized(Received):
    """A PUBLISH over the limit, read and dropped: its topic, flags and ``size`` (its
    remaining length in bytes: topic, packet id, properties and payload); no payload."""

    size = 0


class _Skipping:
    """An oversized PUBLISH being read off the socket and dropped."""

    __slots__ = ("command", "length", "left", "head", "sock")

    def __init__(self, command: int, length: int, sock: object) -> None:
        self.command = command
        self.length = length
        self.left = length
        self.head = bytearray()
        self.sock = sock


class BufferedClient(mqtt.Client):
    """See the module docstring. Used by one network thread, like paho's own client."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._rbuf = b""
        self._rpos = 0
        self._rsock: object = None
        self._bytes_seen = False
        self.more_to_read = False
        """True when received packets wait in the buffer (the next turn must not block)."""
        self._filtered = False
        """True once a per-topic callback is added (then paho dispatches every message)."""
        self.max_publish_bytes = 0
        """A PUBLISH with a remaining length over this is dropped unread (0: no limit)."""
        self._skip: _Skipping | None = None
        self._hdr = bytearray()
        self._hdr_sock: object = None
        self.on_oversized: Callable[[Oversized], None] | None = None
        """Called (instead of ``on_message``) with each oversized PUBLISH dropped unread."""

    def session_kept(self, kept: bool) -> None:
        """MQTT 3.1.1: whether the next CONNECT asks the broker for the session it keeps
        (clean session off) or a new one (paho reads the flag at every connect)."""
        self._clean_session = not kept

    def message_callback_add(self, sub: str, callback: Any) -> None:
        self._filtered = True
        super().message_callback_add(sub, callback)

    def _sock_recv(self, bufsize: int) -> bytes:
        buf = self._rbuf
        pos = self._rpos
        if pos >= len(buf) or self._rsock is not self._sock:
            # empty, or bytes of a previous connection: ask the socket (this raises
            # BlockingIOError when it has nothing, as paho expects)
            self._rbuf = b""
            self._rpos = 0
            buf = super()._sock_recv(READ_CHUNK)
            self._rsock = self._sock
            if not buf:
                return buf  # the connection was closed
            self._rbuf = buf
            pos = 0
        end = pos + bufsize
        self._rpos = end
        return buf[pos:end]

    def buffered(self) -> int:
        """Bytes received and not yet parsed."""
        return max(0, len(self._rbuf) - self._rpos) if self._rsock is self._sock else 0

    def loop_read(self, max_packets: int = 1) -> MQTTErrorCode:
        """Handle every complete packet received (up to :data:`MAX_PACKETS_PER_TURN`)."""
        self._bytes_seen = False
        try:
            for _ in range(MAX_PACKETS_PER_TURN):
                if self._sock is None:
                    return MQTTErrorCode.MQTT_ERR_NO_CONN
                rc = self._packet_read()
                if rc > 0:
                    return self._loop_rc_handle(rc)
                if rc == MQTTErrorCode.MQTT_ERR_AGAIN:
                    break
            return MQTTErrorCode.MQTT_ERR_SUCCESS
        finally:
            self.more_to_read = self.buffered() > 0
            if self._bytes_seen:
                with self._msgtime_mutex:
                    self._last_bytes_received = mqtt.time_func()

    def _loop(self, timeout: float = 1.0) -> MQTTErrorCode:
        # select() cannot see bytes already in our buffer: handle them first, and do not
        # wait in select() while some are left
        if self.more_to_read and self._sock is not None:
            rc = self.loop_read()
            if rc or self._sock is None:
                return rc
            if self.more_to_read:
                timeout = 0.0
        return super()._loop(timeout)

    def _handle_publish(self) -> MQTTErrorCode:
        """A QoS 0 or 1 PUBLISH without MQTT 5 properties (every sensor message, as a rule)
        decoded here; anything else by paho. paho builds an empty ``Properties`` object for
        each MQTT 5 message (about 30 attribute probes) and formats a debug line for each:
        most of its cost per message."""
        header = self._in_packet["command"]
        qos = (header & 0x06) >> 1
        packet = self._in_packet["packet"]
        size = len(packet)
        if qos >= 2 or size < 3:  # QoS 2, and the invalid QoS 3 that paho refuses
            return super()._handle_publish()
        slen = (packet[0] << 8) | packet[1]
        pos = 2 + slen
        if pos + (2 if qos else 0) > size:
            return super()._handle_publish()  # malformed: paho refuses it
        mid = 0
        if qos:
            mid = (packet[pos] << 8) | packet[pos + 1]
            pos += 2
        props = None
        if self._protocol == mqtt.MQTTv5:
            if pos >= size or packet[pos] != 0:
                return super()._handle_publish()  # properties (or malformed): paho decodes
            pos += 1
            props = _NO_PROPERTIES
        elif slen == 0:
            return super()._handle_publish()  # an empty topic: paho refuses it
        message = Received(mid, bytes(packet[2:2 + slen]), bytes(packet[pos:]), qos,
                           bool(header & 0x01), bool(header & 0x08), props)
        self._handle_on_message(message)
        if qos == 0 or self._manual_ack:
            return MQTTErrorCode.MQTT_ERR_SUCCESS
        return self._send_puback(mid)

    def _handle_on_message(self, message: mqtt.MQTTMessage) -> None:
        """paho's dispatch (the callback runs holding ``_in_callback_mutex``, an exception
        in it is logged and raised unless suppressed) without looking up per-topic
        callbacks when there are none."""
        if self._filtered:
            super()._handle_on_message(message)
            return
        on_message = self._on_message
        if on_message is None:
            return
        with self._in_callback_mutex:
            try:
                on_message(self, self._userdata, message)
            except Exception as err:
                self._easy_log(mqtt.MQTT_LOG_ERR, "Caught exception in on_message: %s", err)
                if not self.suppress_exceptions:
                    raise

    def _packet_read(self) -> MQTTErrorCode:
        """A packet that is whole in the buffer is cut out of it at once; a partial one is
        left to paho, which reads it piece by piece (from the buffer, then the socket),
        unless it is a PUBLISH over :attr:`max_publish_bytes` (read and dropped here)."""
        if self._skip is not None:
            if self._skip.sock is self._sock:
                return self._skip_read()
            self._skip = None  # a new connection
        if self._in_packet["command"] == 0 and self._rsock is self._sock:
            buf = self._rbuf
            start = self._rpos
            end = len(buf)
            i = start + 1
            length = 0
            shift = 0
            while i < end and i <= start + 4:
                byte = buf[i]
                i += 1
                length |= (byte & 127) << shift
                shift += 7
                if not byte & 128:
                    if i + length <= end and not self._too_large(buf[start], length):
                        self._rpos = i + length
                        return self._handle_whole(buf[start], buf[i:i + length], length)
                    break
        if self._in_packet["command"] == 0 and self.max_publish_bytes:
            rc = self._header_read()
            if rc is not None:
                return rc
        return super()._packet_read()

    def _too_large(self, command: int, length: int) -> bool:
        return bool(self.max_publish_bytes) and (command & 0xF0) == 0x30 and \
            length > self.max_publish_bytes

    def _header_read(self) -> MQTTErrorCode | None:
        """Read a fixed header (kept across turns); an oversized PUBLISH is then dropped
        unread, anything else handed to paho to read its body (None)."""
        if self._hdr_sock is not self._sock:
            self._hdr = bytearray()
            self._hdr_sock = self._sock
        hdr = self._hdr
        while len(hdr) < 2 or hdr[-1] & 128:
            if len(hdr) > 4:
                return MQTTErrorCode.MQTT_ERR_PROTOCOL  # a remaining length of 5 bytes
            try:
                byte = self._sock_recv(1)
            except BlockingIOError:
                return MQTTErrorCode.MQTT_ERR_AGAIN
            except OSError as err:
                self._easy_log(mqtt.MQTT_LOG_ERR, "failed to receive on socket: %s", err)
                return MQTTErrorCode.MQTT_ERR_CONN_LOST
            if not byte:
                return MQTTErrorCode.MQTT_ERR_CONN_LOST
            hdr += byte
            self._bytes_seen = True
        length = 0
        for k, b in enumerate(hdr[1:]):
            length |= (b & 127) << (7 * k)
        command = hdr[0]
        self._hdr = bytearray()
        if self._too_large(command, length):
            self._skip = _Skipping(command, length, self._sock)
            return self._skip_read()
        self._in_packet["command"] = command
        self._in_packet["have_remaining"] = 1
        self._in_packet["remaining_length"] = length
        self._in_packet["to_process"] = length
        return None

    def _skip_read(self) -> MQTTErrorCode:
        """Read and drop the oversized PUBLISH's bytes; at its end, acknowledge it and give
        it to ``on_message`` as :class:`Oversized`."""
        skip = self._skip
        assert skip is not None
        for _ in range(SKIP_CHUNKS_PER_TURN):
            if skip.left <= 0:
                break
            try:
                data = self._sock_recv(min(skip.left, READ_CHUNK))
            except BlockingIOError:
                return MQTTErrorCode.MQTT_ERR_AGAIN
            except OSError as err:
                self._easy_log(mqtt.MQTT_LOG_ERR, "failed to receive on socket: %s", err)
                return MQTTErrorCode.MQTT_ERR_CONN_LOST
            if not data:
                return MQTTErrorCode.MQTT_ERR_CONN_LOST
            skip.left -= len(data)
            if len(skip.head) < HEAD_KEPT:
                skip.head += data[:HEAD_KEPT - len(skip.head)]
            self._bytes_seen = True
        if skip.left > 0:
            return MQTTErrorCode.MQTT_ERR_AGAIN
        self._skip = None
        head = skip.head
        qos = (skip.command & 0x06) >> 1
        slen = (head[0] << 8) | head[1] if len(head) >= 2 else len(head)
        if len(head) < 2 + slen + (2 if qos else 0) or qos == 3:
            return MQTTErrorCode.MQTT_ERR_PROTOCOL  # malformed, as paho would say
        mid = (head[2 + slen] << 8) | head[3 + slen] if qos else 0
        message = Oversized(mid, bytes(head[2:2 + slen]), b"", qos, bool(skip.command & 0x01),
                            bool(skip.command & 0x08), None)
        message.size = skip.length
        if self.on_oversized is None:
            self._handle_on_message(message)
        else:
            with self._in_callback_mutex:
                self.on_oversized(message)
        if qos == 1 and not self._manual_ack:
            return self._send_puback(mid)
        if qos == 2:
            return self._send_pubrec(mid)  # paho answers the broker's PUBREL without it
        return MQTTErrorCode.MQTT_ERR_SUCCESS

    def _handle_whole(self, command: int, body: bytes, length: int) -> MQTTErrorCode:
        self._in_packet = {"command": command, "have_remaining": 1, "remaining_count": [],
                           "remaining_mult": 1, "remaining_length": length,
                           "packet": body,  # type: ignore[typeddict-item]  # bytes work alike
                           "to_process": 0, "pos": 0}
        try:
            rc = self._packet_handle()
        except MalformedPacket as exc:
            self._easy_log(mqtt.MQTT_LOG_DEBUG, "Received malformed packet: %s", exc)
            rc = MQTTErrorCode.MQTT_ERR_PROTOCOL
        self._in_packet = {"command": 0, "have_remaining": 0, "remaining_count": [],
                           "remaining_mult": 1, "remaining_length": 0,
                           "packet": bytearray(b""), "to_process": 0, "pos": 0}
        self._bytes_seen = True
        return rc


def no_op(*args: Any) -> None:
    """paho's socket-registration callbacks, where nothing is to be done (setting them selects
    paho's queue-only publishing path: see :mod:`thermowarden.shell.mqtt_link`)."""


def release_sockets(client: mqtt.Client) -> None:
    """Close a stopped paho client's sockets now, its wake-up socket pair included.

    paho (2.2) closes that pair only when the client object is finalised. A client held in a
    reference cycle (its callbacks are bound methods of its owner) is finalised by the cyclic
    collector, which may finalise the pair's sockets first: they are then closed late, with a
    ResourceWarning, in whatever code happens to run the collector. Call it once the client's
    network loop has ended; a later ``loop()`` makes a new pair."""
    reset = getattr(client, "_reset_sockets", None)  # paho's own closing of both
    if callable(reset):
        reset()
