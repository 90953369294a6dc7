"""Who may sign in to the web page and API, and their sessions.

The users file (YAML) lists each person with the audiences whose advisories they may act on
and a password hash::

    users:
      - name: ana
        audiences: [safety, facilities]
        password_hash: "pbkdf2_sha256$600000$<salt, base64>$<hash, base64>"

``audiences`` may be empty (the person reads, where reading needs a sign-in, but acts on
nothing); ``buildings`` (building or area ids) limits acting to the advisories of spaces
there (default: the whole site).

Hashes are PBKDF2-HMAC-SHA256 (RFC 8018, section 5.2) from :mod:`hashlib`; 600,000
iterations is the figure OWASP's password storage guidance gives for it (2023).
``thermowarden web-user NAME`` prints an entry. Sessions end ``lifetime_s`` after sign-in
(wall clock) or at sign-out. With a ``store`` they are also kept in the service's SQLite
file (table ``web_sessions``: a SHA-256 of the token, never the token), so a restart signs
nobody out; a session takes the user's current entry of the users file (removed user:
session gone).
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import pathlib
import secrets
import sqlite3
import threading
import time
from collections import deque
from contextlib import closing
from dataclasses import dataclass, field
from logging import getLogger
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from thermowarden.config import ConfigError, issues_from_validation, read_yaml_file
from thermowarden.shell.logs import RateLimiter

log = getLogger("thermowarden.web")

SCHEME = "pbkdf2_sha256"
DEFAULT_ITERATIONS = 600_000
MIN_ITERATIONS = 1_000
FAILURES_ALLOWED = 5
FAILURE_WINDOW_S = 300.0
FAILURE_LINES_PER_MIN = 30.0
"""Failed sign-ins are logged at most this often in all (guessing many names at once)."""

Audience = Literal["facilities", "safety", "integrator"]


def hash_password(password: str, iterations: int = DEFAULT_ITERATIONS,
                  salt: bytes | None = None) -> str:
    """``pbkdf2_sha256$iterations$salt$hash`` (base64 without padding)."""
    salt = salt if salt is not None else os.urandom(16)
    digest = hashlib.pbkdf2_hmac("sha256", password.encode("utf-8"), salt, iterations)

    def b64(b: bytes) -> str:
        return base64.b64encode(b).decode("ascii").rstrip("=")

    return f"{SCHEME}${iterations}${b64(salt)}${b64(digest)}"


def _unb64(text: str) -> bytes:
    return base64.b64decode(text + "=" * (-len(text) % 4), validate=True)


def check_hash(encoded: str) -> tuple[int, bytes, bytes]:
    """Parse a stored hash; raises ValueError naming what is wrong."""
    parts = encoded.split("$")
    if len(parts) != 4 or parts[0] != SCHEME:
        raise ValueError(f"expected {SCHEME}$iterations$salt$hash")
    try:
        iterations = int(parts[1])
        salt, digest = _unb64(parts[2]), _unb64(parts[3])
    except ValueError:
        raise ValueError("the iterations, salt or hash cannot be read") from None
    if iterations < MIN_ITERATIONS:
        raise ValueError(f"at least {MIN_ITERATIONS} iterations")
    if len(salt) < 8 or len(digest) != 32:
        raise ValueError("salt of at least 8 bytes and a 32-byte hash expected")
    return iterations, salt, digest


def verify_password(password: str, encoded: str) -> bool:
    iterations, salt, digest = check_hash(encoded)
    got = hashlib.pbkdf2_hmac("sha256", password.encode("utf-8"), salt, iterations)
    return hmac.compare_digest(got, digest)


class UserEntry(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    name: str = Field(min_length=1, max_length=100, pattern=r"^[^\s$][^$]*$")
    audiences: list[Audience] = Field(default_factory=list)
    buildings: list[str] | None = None
    password_hash: str

    @field_validator("password_hash")
    @classmethod
    def _hash(cls, v: str) -> str:
        check_hash(v)
        return v


class UsersFile(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    users: list[UserEntry] = Field(default_factory=list)


@dataclass(frozen=True)
class User:
    name: str
    audiences: frozenset[str]
    buildings: frozenset[str] | None = None
    """Building or area ids the user may act in; None: everywhere."""

    def may_act(self, audience: str, building: str | None) -> bool:
        return audience in self.audiences and (
            self.buildings is None or (building is not None and building in self.buildings))

    @classmethod
    def of(cls, entry: UserEntry) -> User:
        return cls(entry.name, frozenset(entry.audiences),
                   frozenset(entry.buildings) if entry.buildings is not None else None)


def load_users(path: str | os.PathLike[str]) -> dict[str, UserEntry]:
    """Read the users file; a bad one raises :class:`ConfigError` with file and line."""
    data, smap = read_yaml_file(path)
    try:
        parsed = UsersFile.model_validate(data if data is not None else {})
    except ValidationError as exc:
        raise ConfigError(issues_from_validation(exc, smap, {})) from None
    out: dict[str, UserEntry] = {}
    for u in parsed.users:
        if u.name in out:
            from thermowarden.config import ConfigIssue

            raise ConfigError([ConfigIssue(None, f"{path}: user {u.name!r} appears twice")])
        out[u.name] = u
    return out


def users_yaml(entries: list[UserEntry]) -> str:
    """A whole users file (the form :func:`load_users` reads) with these entries."""
    lines = ["users:"]
    for e in entries:
        lines += [f"  - name: {json.dumps(e.name)}",
                  f"    audiences: [{', '.join(e.audiences)}]"]
        if e.buildings is not None:
            lines.append(f"    buildings: [{', '.join(e.buildings)}]")
        lines.append(f"    password_hash: \"{e.password_hash}\"")
    return "\n".join(lines) + "\n"


def write_private(path: pathlib.Path, text: str) -> None:
    """Write ``text`` to ``path`` readable by its owner only, replacing it in one step."""
    tmp = path.with_name(path.name + ".tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(text)
    os.replace(tmp, path)


@dataclass
class Session:
    token: str
    user: User
    expires: float
    csrf: str
    flash: list[str] = field(default_factory=list)


SESSIONS_SCHEMA = """
CREATE TABLE IF NOT EXISTS web_sessions (
    token_sha256 TEXT PRIMARY KEY,
    name TEXT NOT NULL,
    csrf TEXT NOT NULL,
    expires REAL NOT NULL        -- wall clock, epoch s
);
"""


def _digest(token: str) -> str:
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


class Sessions:
    """Signed-in users (thread-safe). Expiry on the wall clock (``now``, epoch s), so that
    kept sessions mean the same after a restart; ``store`` keeps them there."""

    def __init__(self, users: dict[str, UserEntry], lifetime_s: float,
                 store: str | os.PathLike[str] | None = None) -> None:
        self.users = users
        self.dummy_iterations = max((check_hash(u.password_hash)[0] for u in users.values()),
                                    default=DEFAULT_ITERATIONS)
        self.lifetime_s = lifetime_s
        self.now = time.time
        self.lock = threading.Lock()
        self.sessions: dict[str, Session] = {}
        self.failures: dict[str, deque[float]] = {}
        self.refused_while_locked: dict[str, int] = {}
        self.log_limit = RateLimiter(per_minute=FAILURE_LINES_PER_MIN,
                                     burst=int(FAILURE_LINES_PER_MIN), clock=time.monotonic)
        self.store = os.fspath(store) if store is not None else None
        if self.store is not None:
            with closing(self._db()) as db:
                db.executescript(SESSIONS_SCHEMA)
                db.execute("DELETE FROM web_sessions WHERE expires <= ?", (self.now(),))

    def _db(self) -> sqlite3.Connection:
        assert self.store is not None
        db = sqlite3.connect(self.store, timeout=30.0, isolation_level=None)
        db.execute("PRAGMA journal_mode=WAL")
        return db

    def sign_in(self, name: str, password: str, client: str = "") -> Session | None:
        """A new session, or None (unknown name, wrong password, or too many failures).

        Logged (``thermowarden.web``; the name quoted, never the password; ``client`` is
        the caller's address): a sign-in at INFO; a failure, the lock after
        ``FAILURES_ALLOWED`` failures in ``FAILURE_WINDOW_S`` and the first attempt
        refused while locked at WARNING (failure lines at most ``FAILURE_LINES_PER_MIN``
        a minute in all, with the number left out)."""
        now = self.now()
        key = name[:100]
        where = f" from {client}" if client else ""
        with self.lock:
            fails = self.failures.setdefault(key, deque())
            while fails and fails[0] < now - FAILURE_WINDOW_S:
                fails.popleft()
            if len(fails) >= FAILURES_ALLOWED:
                refused = self.refused_while_locked.get(key, 0) + 1
                self.refused_while_locked[key] = refused
                if refused == 1:
                    log.warning("web sign-in as %r%s refused: locked after %d failures "
                                "within %.0f s (further attempts while locked are counted, "
                                "not logged)", key, where, FAILURES_ALLOWED, FAILURE_WINDOW_S)
                return None
            locked_out = self.refused_while_locked.pop(key, 0)
        entry = self.users.get(name)
        if entry is None:  # an unknown name costs about as much as a wrong password
            hashlib.pbkdf2_hmac("sha256", password.encode("utf-8"), b"no such user",
                                self.dummy_iterations)
            ok = False
        else:
            ok = verify_password(password, entry.password_hash)
        also = f"; {locked_out} attempt(s) were refused while it was locked" \
            if locked_out else ""
        with self.lock:
            if not ok or entry is None:
                fails = self.failures.setdefault(key, deque())
                fails.append(now)
                why = "unknown name" if entry is None else "wrong password"
                allowed, dropped = self.log_limit.allow("failure")
                if allowed:
                    more = f" ({dropped} failure line(s) left out)" if dropped else ""
                    log.warning("web sign-in as %r%s failed: %s (%d of %d failures allowed "
                                "in %.0f s)%s%s", key, where, why, len(fails),
                                FAILURES_ALLOWED, FAILURE_WINDOW_S, also, more)
                if len(fails) >= FAILURES_ALLOWED:
                    log.warning("web sign-in as %r locked for up to %.0f s after %d "
                                "failures", key, FAILURE_WINDOW_S, len(fails))
                if len(self.failures) > 10_000:
                    self.failures.clear()
                    self.refused_while_locked.clear()
                return None
            self._purge(now)
            s = Session(secrets.token_urlsafe(32), User.of(entry), now + self.lifetime_s,
                        secrets.token_urlsafe(16))
            self.sessions[s.token] = s
        if self.store is not None:
            with closing(self._db()) as db:
                db.execute("INSERT OR REPLACE INTO web_sessions(token_sha256, name, csrf, "
                           "expires) VALUES(?, ?, ?, ?)",
                           (_digest(s.token), entry.name, s.csrf, s.expires))
        log.info("web sign-in as %r%s%s", entry.name, where, also)
        return s

    def get(self, token: str | None) -> Session | None:
        if not token or len(token) > 200:
            return None
        now = self.now()
        with self.lock:
            s = self.sessions.get(token)
            if s is not None:
                if now < s.expires:
                    return s
                del self.sessions[token]
        if s is not None:
            self._forget(token)
            return None
        return self._restore(token, now)

    def _restore(self, token: str, now: float) -> Session | None:
        """A session kept in the store before a restart (with the user's current entry)."""
        if self.store is None:
            return None
        with closing(self._db()) as db:
            row = db.execute("SELECT name, csrf, expires FROM web_sessions WHERE "
                             "token_sha256 = ?", (_digest(token),)).fetchone()
        if row is None:
            return None
        name, csrf, expires = row
        entry = self.users.get(name)
        if entry is None or now >= expires:
            self._forget(token)
            return None
        s = Session(token, User.of(entry), float(expires), str(csrf))
        with self.lock:
            return self.sessions.setdefault(token, s)

    def _forget(self, token: str) -> None:
        if self.store is not None:
            with closing(self._db()) as db:
                db.execute("DELETE FROM web_sessions WHERE token_sha256 = ?", (_digest(token),))

    def sign_out(self, token: str | None) -> bool:
        with self.lock:
            found = self.sessions.pop(token or "", None) is not None
        if token:
            self._forget(token)
        return found

    def _purge(self, now: float) -> None:
        for token in [t for t, s in self.sessions.items() if now >= s.expires]:
            del self.sessions[token]

    def remaining_s(self, s: Session) -> float:
        return max(0.0, s.expires - self.now())
