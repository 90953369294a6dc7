"""What the web thread's routes share: the site directory, the live view, the store reader,
the sessions, and the bridge that hands commands to the engine thread."""

from __future__ import annotations

import datetime as dt
import json
import threading
import zoneinfo
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from thermowarden.shell.inbox import Inbox, Incoming
from thermowarden.shell.web.history import StoreReader
from thermowarden.shell.web.live import LiveView, SiteDirectory
from thermowarden.shell.web.users import Sessions

COMMAND_TIMEOUT_S = 10.0


class CommandBridge:
    """Hands a command to the engine thread through the MQTT commands' inbox and waits for
    the engine's reply."""

    def __init__(self, inbox: Inbox, command_prefix: str, now: Callable[[], float],
                 timeout_s: float = COMMAND_TIMEOUT_S) -> None:
        self.inbox = inbox
        self.command_prefix = command_prefix
        self.now = now
        self.timeout_s = timeout_s

    def submit(self, verb: str, body: dict[str, Any], audience: str = "",
               user: str = "") -> dict[str, Any] | None:
        """The engine's reply, or None when the engine did not answer in time or the inbox
        is full. The command goes as ``<prefix>/commands/<audience>/<verb>/<user>`` with the
        signed-in user as its identity, as a trusted gateway's MQTT command would."""
        done = threading.Event()
        box: dict[str, dict[str, Any]] = {}

        def on_reply(reply: dict[str, Any]) -> None:
            box["reply"] = reply
            done.set()

        item = Incoming(f"{self.command_prefix}{audience}/{verb}/{user}",
                        json.dumps(body).encode("utf-8"), self.now(), identity=user or None,
                        kind="command", on_reply=on_reply)
        if not self.inbox.put(item):
            return None
        if not done.wait(self.timeout_s):
            return None
        return box["reply"]


@dataclass
class WebContext:
    directory: SiteDirectory
    view: LiveView
    reader: StoreReader
    sessions: Sessions | None
    bridge: CommandBridge
    now: Callable[[], float]
    read_needs_sign_in: bool = False

    @property
    def tz(self) -> dt.tzinfo:
        return zoneinfo.ZoneInfo(self.directory.timezone)

    def follow(self, directory: SiteDirectory) -> None:
        """A reload's site (called on the engine thread): the web thread's next request
        reads the new directory, and the view forgets spaces that are gone."""
        self.directory = directory
        self.view.keep_only(set(directory.by_id))

    def find_advisory(self, advisory_id: str) -> tuple[dict[str, Any] | None, bool]:
        """(the advisory, whether it is live): a live one from the view, else its last
        record in the store (reads the store: call it off the event loop)."""
        a = self.view.advisory(advisory_id)
        if a is not None:
            return a, True
        return self.reader.last_advisory(advisory_id), False
