"""MQTT topic templates with named placeholders.

A template such as ``plant/{space}/radiant/{side}`` matches topics segment by segment: a
placeholder takes exactly one whole segment (it never contains ``/``), literal segments
must be equal. Its subscription filter replaces each placeholder with ``+``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

PLACEHOLDERS: Final = frozenset({"space", "side", "sensor"})


class TemplateError(ValueError):
    """A topic template that cannot be used."""


@dataclass(frozen=True)
class TopicTemplate:
    """A parsed template: per segment either a literal or a placeholder name."""

    text: str
    segments: tuple[tuple[bool, str], ...]
    """(is_placeholder, literal text or placeholder name) per segment."""

    @classmethod
    def parse(cls, text: str) -> TopicTemplate:
        if not text:
            raise TemplateError("empty topic template")
        if any(c in text for c in "+#\0"):
            raise TemplateError("templates use {placeholders}, not MQTT wildcards (+, #)")
        segments: list[tuple[bool, str]] = []
        seen: set[str] = set()
        for seg in text.split("/"):
            if seg.startswith("{") and seg.endswith("}") and seg.count("{") == 1:
                name = seg[1:-1]
                if name not in PLACEHOLDERS:
                    known = ", ".join("{" + p + "}" for p in sorted(PLACEHOLDERS))
                    raise TemplateError(f"unknown placeholder {{{name}}} (known: {known})")
                if name in seen:
                    raise TemplateError(f"placeholder {{{name}}} used twice")
                seen.add(name)
                segments.append((True, name))
            elif "{" in seg or "}" in seg:
                raise TemplateError(f"a placeholder must fill a whole topic segment: {seg!r}")
            else:
                segments.append((False, seg))
        return cls(text, tuple(segments))

    @property
    def placeholders(self) -> frozenset[str]:
        return frozenset(name for is_ph, name in self.segments if is_ph)

    @property
    def subscription(self) -> str:
        """The MQTT subscription filter covering every topic this template matches."""
        return "/".join("+" if is_ph else text for is_ph, text in self.segments)

    def match(self, topic_segments: list[str]) -> dict[str, str] | None:
        """Placeholder values if the split topic matches, else None."""
        if len(topic_segments) != len(self.segments):
            return None
        values: dict[str, str] = {}
        for (is_ph, text), seg in zip(self.segments, topic_segments, strict=True):
            if is_ph:
                if not seg:
                    return None
                values[text] = seg
            elif seg != text:
                return None
        return values

    def render(self, **values: str) -> str:
        """The topic for the given placeholder values."""
        return "/".join(values[text] if is_ph else text for is_ph, text in self.segments)
