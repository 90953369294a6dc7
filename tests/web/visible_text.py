"""The rule for text a person reads (a page's or a report's visible text): words, not field
names, and a unit beside every number.

:func:`problems` returns what breaks the rule, each with the text around it; an empty list
means the text passes. It is used on the web page (through a real browser) and on the
report's HTML (its text as a browser shows it).

What it refuses
---------------

- **Field names**: any ``snake_case`` word, that is letters or digits joined by at least
  one underscore (``wbgt_effective``, ``heat_stress.wbgt``, ``fan_state``).
- **Bare numbers**: a number (``12``, ``-0.5``, ``+3``, ``−1.2``, ``1,250``, ``.5``) that
  none of the forms below accounts for.

What a number may be
--------------------

1. **A value with its unit** right after it, with or without a space, or joined by a
   hyphen as an adjective (``60-minute mean``): a unit symbol (°C,
   °F, K, %, ‰, m/s, km/h, W/m², W, kW, Pa, kPa, hPa, g, kg, kg/kg, g/kg, clo, met, lux, lx,
   ppm, dB, mm, cm, m, °, s, min, h, ms) or a unit word (second(s), minute(s), hour(s),
   day(s), week(s), percentage point(s), degree(s), kelvin, watt(s)).
2. **The first number of a range** whose second number carries the unit:
   ``20–24 °C``, ``20 - 24 °C``, ``20 to 24 °C``, ``20.5 … 24 °C``.
3. **A time or a date**: ``17:29``, ``17:29:05``, ``2026-07-14``, ``2026-07-14T17:29``,
   ``14/07/2026``, a day with a month name (``14 Jul``, ``Jul 14``, ``14 July 2026``,
   ``July 2026``), a year after a month name, and a UTC offset (``+02:00``, ``UTC+2``).
4. **A count of things**: a whole number followed by a noun that counts (``3 spaces``,
   ``1 live``, ``12 advisories``, ``2 of 5 points``: see :data:`COUNT_NOUNS`; the first
   number of ``N of M`` counts what the second counts), and a whole number or ``N of M``
   alone in parentheses after words (a heading's count, ``Live advisories (3)``,
   ``Spaces (2 of 12)``); a page number in a pager (``Page 2``).
5. **A standard, a reference or a named scale**: the number of a standard and a clause
   of it (``ISO 7730``, ``EN 16798-1``, ``ASHRAE 55-2020 5.3``, ``ISO 7730:2005 6.2``,
   ``ISO/TS 13732-2``), a reference into a document (``ch. 1``, ``eq. (1)/(2)``,
   ``Table 5.4.2.4``, ``Annex 2``), the year of a citation (``Fundamentals 2017``,
   ``Richardson 1979``, ``colleagues, 2012``, ``et al. (2008)``: a year from 1900 to 2099
   after a capitalised word, or in parentheses), the
   number of a category (``category 2``, ``class 1``), a scale's ends (``scale -3 to +3``,
   ``(-3 to +3)``).
6. **The value of a dimensionless index** after its name, with at most one parenthesised
   note between (``PMV -0.5``, ``PMV (ISO 7730) -0.5``, ``Humidex 34``), and the numbers
   that follow it joined only by small words (``PMV 0.62 (limit 0.5``, ``PMV from 0.86
   back to 0.5``, ``PMV 15 min later 0.6``, a table row ``PMV 0.6 0.3 0.5``; the small
   words are those of ``_CONNECTIVE``); the names are :data:`DIMENSIONLESS`.
   A line break between name and value is allowed (a card's term and value).
7. **Digits inside a word**: a number glued to letters (or to a word by a hyphen) is part
   of a name, not a number
   (``CO2``, ``f2``, ``PM10``, ``B12``, ``north-2``).

Everything else is a problem: ``Fans 1.0``, ``Shading (lowered) 100.0``,
``-10.5 realised``, ``threshold 28``.
"""

from __future__ import annotations

import re
from typing import Final

UNIT_SYMBOLS: Final = ("°C", "°F", "K", "%", "‰", "m/s", "km/h", "W/m²", "W/m2", "W", "kW",
                       "Pa", "kPa", "hPa", "g", "kg", "kg/kg", "g/kg", "clo", "met", "lux", "m²",
                       "m2", "lx", "ppm", "dB", "mm", "cm", "m", "°", "s", "min", "h", "ms")
UNIT_WORDS: Final = ("seconds", "second", "minutes", "minute", "hours", "hour", "days",
                     "day", "weeks", "week", "percentage points", "percentage point",
                     "degrees", "degree", "kelvin", "watts", "watt")
COUNT_NOUNS: Final = (
    "space", "spaces", "advisory", "advisories", "alert", "alerts", "point", "points",
    "reading", "readings", "sensor", "sensors", "event", "events", "rule", "rules",
    "building", "buildings", "floor", "floors", "area", "areas", "zone", "zones",
    "person", "people", "user", "users", "worker", "workers", "live", "new", "more",
    "times", "time", "row", "rows", "page", "pages", "screen", "screens", "check",
    "checks", "item", "items", "value", "values", "sample", "samples", "message",
    "messages", "day", "days", "shift", "shifts", "of", "raised", "cleared", "active",
    "acknowledged", "shelved", "urgent", "high", "medium", "low", "stale", "fresh",
    "missing", "other", "others", "index", "indices", "window", "windows", "fan", "fans",
    "blind", "blinds", "night", "nights", "week", "weeks", "month", "months", "instance",
    "instances", "shard", "shards", "audience", "audiences", "crossing", "crossings",
)
"""Words after a whole number that make it a count (``3 spaces``, ``1 live``, ``2 of 5``)."""
DIMENSIONLESS: Final = ("PMV", "Humidex", "humidex", "Comfort vote", "comfort vote",
                        "Sky clearness", "clearness")
"""Names of indices without a unit, whose value directly follows the name."""
MONTHS: Final = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Sept",
                 "Oct", "Nov", "Dec", "January", "February", "March", "April", "June",
                 "July", "August", "September", "October", "November", "December")

FIELD_NAME: Final = re.compile(r"(?<![\w.])[A-Za-z][\w.]*[A-Za-z0-9]")
"""A word of letters, digits, dots and underscores; a field name when it holds
:data:`SNAKE` (dotted parts included: ``web.users_file``, ``heat_stress.wbgt``)."""
SNAKE: Final = re.compile(r"[A-Za-z0-9]_[A-Za-z0-9]")
NUMBER: Final = re.compile(
    r"(?<![\w.,:/])(?P<sign>[-+−±]?)(?P<num>(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d+)?|\.\d+)"
    r"(?![\w.:/]\w|\w|,\d{3})")
"""A number standing alone: not glued to letters or other digits' punctuation (``f2``,
``12:30``, ``2026-07-14`` are handled as words or dates, see the patterns below)."""

_units = "|".join(re.escape(u) for u in sorted(UNIT_SYMBOLS + UNIT_WORDS, key=len,
                                               reverse=True))
_UNIT_AFTER = re.compile(rf"(?:[ \u00a0\u202f]?|-)(?:{_units})(?![A-Za-z0-9²/])")
_RANGE_AFTER = re.compile(
    rf"\s*(?:–|—|-|to|…|\.\.\.?)\s*[-+−]?(?:\d+(?:\.\d+)?|\.\d+)\s?(?:{_units})"
    r"(?![A-Za-z0-9²/])")
_month = "|".join(sorted(MONTHS, key=len, reverse=True))
_COVERED: Final = [
    # times, dates, offsets
    re.compile(r"\b\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?\b"),
    re.compile(r"\b\d{4}-\d{2}-\d{2}(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?"
               r"(?:Z|[+-]\d{2}:?\d{2})?)?\b"),
    re.compile(r"\b\d{1,2}/\d{1,2}/\d{2,4}\b"),
    re.compile(rf"\b\d{{1,2}}(?:st|nd|rd|th)?\s+(?:{_month})\b\.?(?:,?\s+\d{{4}})?"),
    re.compile(rf"\b(?:{_month})\.?\s+\d{{1,2}}(?:st|nd|rd|th)?\b(?:,?\s+\d{{4}})?"),
    re.compile(rf"\b(?:{_month})\.?\s+\d{{4}}\b"),
    re.compile(r"\bUTC\s?[+-−]\s?\d{1,2}(?::\d{2})?\b|[+-]\d{2}:\d{2}\b"),
    # standards, categories, scales
    re.compile(r"\b(?:ISO(?:/TS|/TR)?|EN|ASHRAE|ANSI|IEC|BS|DIN|NF|ACGIH|NIOSH|CIBSE|TM)"
               r"\s+\d+(?:[-.]\d+)*(?::\d{4})?(?:[+/]A\d+(?::\d{4})?)?"
               r"(?:(?<=\d{4})\s+\d+(?:\.\d+)+)?"),
    # references into a document: ch. 1, eq. (1)/(2), clause 6.2, Table 5.4.2.4
    re.compile(r"\b(?:ch|chapter|eq|Eq|equation|clause|[Aa]nnex|[Aa]ppendix|[Tt]able|"
               r"[Ss]ection|[Ff]igure|[Ff]ig)\.?\s*\(?\d+(?:\.\d+)*\)?(?:/\(\d+\))*"),
    # a year of a citation in parentheses (et al. (2008)); after a name: see _YEAR_AFTER
    re.compile(r"\((?:19|20)\d\d\)"),
    re.compile(r"\b(?:[Cc]ategory|[Cc]lass|[Ll]evel|[Gg]rade|[Pp]age|[Tt]able|[Ss]ection)"
               r"\s+\d+\b"),
    re.compile(r"(?:\b[Ss]cale\s+|\()[-+−]?\d+(?:\.\d+)?\s+to\s+[-+−]?\d+(?:\.\d+)?"),
    # digits glued to a word by a hyphen: a name (north-2, B-12)
    re.compile(r"\b[A-Za-z][A-Za-z]*-\d+\b"),
    # a heading's count: (3), (2 of 12), (2 of 12, 1-50 shown)
    re.compile(r"(?<=[A-Za-z\s])\(\d+(?:\s+of\s+\d+)?(?:,\s*\d+[-–]\d+\s+shown)?\)"),
]
_YEAR = re.compile(r"(?:19|20)\d\d")
_YEAR_AFTER = re.compile(r"(?:\b[A-Z][A-Za-z]*|\bcolleagues|\bal\.),?\s+$")
"""What comes before a year of a citation: a capitalised name, ``colleagues``, ``et al.``"""
_count_nouns = "|".join(sorted(COUNT_NOUNS, key=len, reverse=True))
_COUNT_AFTER = re.compile(rf"\s+(?:{_count_nouns})\b")
_dimensionless = "|".join(re.escape(n) for n in DIMENSIONLESS)
_CONNECTIVE = (r"(?:[-+−]?\d+(?:\.\d+)?|from|to|back|limit|of|at|most|least|below|above|"
               r"by|now|then|was|is|and|or|the|a|measured|over|after|"
               r"afterwards|before|min|later|when|acted|on|predicted)")
_DIMENSIONLESS_BEFORE = re.compile(
    rf"\b(?:{_dimensionless})(?:,\s*(?:ISO|EN|ASHRAE)\s[\w\s-]{{1,12}}?)?"
    rf"(?:\s*\([^()\n]{{1,60}}\))?(?:[\s,(:]+{_CONNECTIVE})*[\s,(:]*$")


def field_names(text: str) -> list[str]:
    """The snake_case words in ``text``, each once, in order."""
    seen: list[str] = []
    for m in FIELD_NAME.finditer(text):
        if SNAKE.search(m.group(0)) and m.group(0) not in seen:
            seen.append(m.group(0))
    return seen


def bare_numbers(text: str) -> list[str]:
    """Each number in ``text`` that no accepted form accounts for, with the text around it
    (``…Fans [1.0]…``)."""
    covered = [False] * len(text)
    for pattern in _COVERED:
        for m in pattern.finditer(text):
            for i in range(m.start(), m.end()):
                covered[i] = True
    out = []
    for m in NUMBER.finditer(text):
        start, end = m.start("num"), m.end("num")
        if any(covered[start:end]):
            continue
        after = text[end:]
        if _UNIT_AFTER.match(after) or _RANGE_AFTER.match(after):
            continue
        whole = "." not in m.group("num")
        if whole and not m.group("sign") and _COUNT_AFTER.match(after):
            continue
        if (not m.group("sign") and _YEAR.fullmatch(m.group("num"))
                and _YEAR_AFTER.search(text[max(0, m.start() - 40):m.start()])):
            continue
        if _DIMENSIONLESS_BEFORE.search(text[max(0, m.start() - 120):m.start()]):
            continue
        before = text[max(0, m.start() - 30):m.start()].replace("\n", " ⏎ ")
        tail = text[end:end + 20].replace("\n", " ⏎ ")
        out.append(f"…{before}[{m.group(0)}]{tail}…")
    return out


def problems(text: str) -> list[str]:
    """Everything in ``text`` a person should not have to read: field names, then numbers
    without a unit (see the module's docstring for exactly what passes)."""
    return ([f"field name {name!r}" for name in field_names(text)]
            + [f"number without a unit {ctx}" for ctx in bare_numbers(text)])
