"""Delivery and retention settings: refused with file, line and what is wrong; secrets
only from the environment or a file."""

from __future__ import annotations

import pytest

from thermowarden.config import ConfigError, load_site

BASE = "site: {id: x, timezone: Europe/London}\n"


def load(tmp_path, text, environ=None):
    path = tmp_path / "site.yaml"
    path.write_text(BASE + text)
    return load_site(path, environ or {})


@pytest.mark.parametrize(("text", "message"), [
    ("delivery:\n  audiences:\n    safety:\n      webhook: {url: 'https://h/x', secret: abc}\n",
     "site.yaml:5:37: delivery.audiences.safety.webhook.secret: secrets do not belong in the "
     "site file; set THERMOWARDEN_DELIVERY__AUDIENCES__SAFETY__WEBHOOK__SECRET or secret_file"),
    ("delivery:\n  audiences:\n    safety:\n      webhook: {url: 'https://h/x'}\n",
     "a webhook needs a shared secret"),
    ("delivery:\n  audiences:\n    safety:\n      webhook: {url: 'ftp://h/x', secret_file: s}\n",
     "is not an http:// or https:// URL"),
    ("delivery:\n  audiences:\n    safety: {quiet_hours: '22:00-06:00'}\n",
     "give a webhook, an email, or both"),
    ("delivery:\n  audiences:\n    safety:\n      quiet_hours: '22-06'\n"
     "      webhook: {url: 'https://h/x', secret_file: s}\n", "is not HH:MM-HH:MM"),
    ("delivery:\n  audiences:\n    cleaners:\n      webhook: {url: 'https://h', "
     "secret_file: s}\n", "delivery.audiences.cleaners"),
    ("retention: {events_days: 0}\n", "retention.events_days: Input should be greater than"),
])
def test_refused(tmp_path, text, message):
    with pytest.raises(ConfigError) as exc:
        load(tmp_path, text)
    assert message in str(exc.value)


def test_secret_from_the_environment_and_defaults(tmp_path):
    config = load(tmp_path, "delivery:\n  audiences:\n    safety:\n"
                  "      webhook: {url: 'https://h/x'}\n",
                  {"THERMOWARDEN_DELIVERY__AUDIENCES__SAFETY__WEBHOOK__SECRET": "abc"})
    hook = config.delivery.audiences["safety"].webhook
    assert hook is not None and hook.secret is not None
    assert hook.secret.get_secret_value() == "abc"
    assert "abc" not in repr(config)
    assert config.retention.events_days == config.retention.samples_days == 90
    assert config.delivery.audiences["safety"].low_priority_digest_s == 3600
