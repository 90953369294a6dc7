"""systemd notification (Type=notify): READY, WATCHDOG, STOPPING, STATUS.

Speaks the sd_notify datagram protocol directly (no dependency); does nothing when the
service is not started by systemd (NOTIFY_SOCKET unset).
"""

from __future__ import annotations

import os
import socket


def notify(message: str, environ: dict[str, str] | None = None) -> bool:
    """Send ``message`` (for example ``"READY=1"``) to systemd; False if not under systemd."""
    env = os.environ if environ is None else environ
    address = env.get("NOTIFY_SOCKET")
    if not address:
        return False
    if address.startswith("@"):
        address = "\0" + address[1:]
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as sock:
        try:
            sock.connect(address)
            sock.sendall(message.encode())
        except OSError:
            return False
    return True


def watchdog_interval_s(environ: dict[str, str] | None = None) -> float | None:
    """Half the watchdog timeout systemd set (WATCHDOG_USEC), or None when there is none."""
    env = os.environ if environ is None else environ
    usec = env.get("WATCHDOG_USEC")
    if not usec or not usec.isdigit():
        return None
    return int(usec) / 1e6 / 2.0
