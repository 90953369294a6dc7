"""MQTT topic templates with named placeholders.

A template such as ``{building}/{floor}/desk-{space}/radiant/{side}`` matches topics
segment by segment: literal segments must be equal, and a segment holding placeholders
(alone, or inside literal text such as ``desk-{space}``) matches a whole topic segment
whose literal parts are equal; a placeholder's value never contains ``/``. Two
placeholders in one segment need literal text between them. Its subscription filter
replaces each segment that holds a placeholder with ``+``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Final

TREE_PLACEHOLDERS: Final = frozenset({"building", "floor", "area", "space"})
"""Placeholders that name a level of the site's tree: known for every space up front."""
PLACEHOLDERS: Final = TREE_PLACEHOLDERS | {"side", "sensor"}

_PART = re.compile(r"\{([^{}/]*)\}")

Part = tuple[bool, str]
"""(is_placeholder, literal text or placeholder name)."""


class TemplateError(ValueError):
    """A topic template that cannot be used."""


def _segment_regex(parts: tuple[Part, ...]) -> re.Pattern[str]:
    out = []
    for is_ph, text in parts:
        out.append(f"(?P<{text}>[^/]+?)" if is_ph else re.escape(text))
    return re.compile("".join(out) + r"\Z")


@dataclass(frozen=True)
class TopicTemplate:
    """A parsed template: per segment the tuple of its parts."""

    text: str
    segments: tuple[tuple[Part, ...], ...]
    """Per topic segment, its parts: literal text and placeholders in order."""

    @classmethod
    def parse(cls, text: str) -> TopicTemplate:
        if not text:
            raise TemplateError("empty topic template")
        if any(c in text for c in "+#\0"):
            raise TemplateError("templates use {placeholders}, not MQTT wildcards (+, #)")
        segments: list[tuple[Part, ...]] = []
        seen: set[str] = set()
        for seg in text.split("/"):
            parts: list[Part] = []
            pos = 0
            for m in _PART.finditer(seg):
                literal = seg[pos:m.start()]
                if "{" in literal or "}" in literal:
                    raise TemplateError(f"unbalanced braces in topic segment {seg!r}")
                if literal:
                    parts.append((False, literal))
                elif parts and parts[-1][0]:
                    raise TemplateError(f"two placeholders in {seg!r} need literal text "
                                        "between them")
                name = m.group(1)
                if name not in PLACEHOLDERS:
                    known = ", ".join("{" + p + "}" for p in sorted(PLACEHOLDERS))
                    raise TemplateError(f"unknown placeholder {{{name}}} (known: {known})")
                if name in seen:
                    raise TemplateError(f"placeholder {{{name}}} used twice")
                seen.add(name)
                parts.append((True, name))
                pos = m.end()
            rest = seg[pos:]
            if "{" in rest or "}" in rest:
                raise TemplateError(f"unbalanced braces in topic segment {seg!r}")
            if rest or not parts:
                parts.append((False, rest))
            segments.append(tuple(parts))
        return cls(text, tuple(segments))

    @property
    def placeholders(self) -> frozenset[str]:
        return frozenset(name for parts in self.segments for is_ph, name in parts if is_ph)

    @property
    def tree_placeholders(self) -> tuple[str, ...]:
        """The placeholders naming levels of the tree, in a fixed order (building, floor,
        area, space): the key that finds a space from a topic."""
        return tuple(p for p in ("building", "floor", "area", "space")
                     if p in self.placeholders)

    @property
    def subscription(self) -> str:
        """The MQTT subscription filter covering every topic this template matches."""
        return self.render_filter()

    def _regexes(self) -> tuple[re.Pattern[str] | str, ...]:
        cached: tuple[re.Pattern[str] | str, ...] | None = self.__dict__.get("_rx")
        if cached is None:
            cached = tuple(
                parts[0][1] if len(parts) == 1 and not parts[0][0] else _segment_regex(parts)
                for parts in self.segments)
            object.__setattr__(self, "_rx", cached)
        return cached

    def match(self, topic_segments: list[str]) -> dict[str, str] | None:
        """Placeholder values if the split topic matches, else None."""
        if len(topic_segments) != len(self.segments):
            return None
        values: dict[str, str] = {}
        for rx, seg in zip(self._regexes(), topic_segments, strict=True):
            if isinstance(rx, str):
                if seg != rx:
                    return None
                continue
            m = rx.match(seg)
            if m is None:
                return None
            values.update(m.groupdict())
        return values

    def render(self, **values: str) -> str:
        """The topic for the given placeholder values (every placeholder needs one)."""
        return "/".join("".join(values[text] if is_ph else text for is_ph, text in parts)
                        for parts in self.segments)

    def render_filter(self, **values: str) -> str:
        """A subscription filter: the given placeholders filled in, and ``+`` for every
        segment that still holds a placeholder without a value."""
        out = []
        for parts in self.segments:
            if any(is_ph and text not in values for is_ph, text in parts):
                out.append("+")
            else:
                out.append("".join(values[text] if is_ph else text for is_ph, text in parts))
        return "/".join(out)

    def render_partial(self, **values: str) -> str:
        """The template with the given placeholders filled in and the others kept as
        ``{name}`` (two spaces' topics are the same exactly when these are)."""
        return "/".join("".join((values.get(text, "{" + text + "}")) if is_ph else text
                                for is_ph, text in parts)
                        for parts in self.segments)
