"""Review windows: an ISO week (``2026-W46``) or a from/to date range, as UTC instants.

A window is half-open, ``[start, end)``. Dates are calendar days in the given time zone.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from querygap.errors import ConfigError

_WEEK = re.compile(r"^(\d{4})-?W(\d{1,2})$", re.I)


@dataclass(frozen=True)
class Window:
    review_id: str
    start: datetime
    end: datetime

    @property
    def days(self) -> float:
        return (self.end - self.start).total_seconds() / 86400

    def previous(self) -> Window:
        """The window of the same length just before this one."""
        span = self.end - self.start
        start = self.start - span
        if _WEEK.match(self.review_id):
            y, w, _ = (self.start + timedelta(days=3)).isocalendar()
            prev = date.fromisocalendar(y, w, 1) - timedelta(days=7)
            py, pw, _ = prev.isocalendar()
            return Window(f"{py}-W{pw:02d}", start, self.start)
        return Window(
            f"{start.date()}_{(self.start - timedelta(days=1)).date()}", start, self.start
        )


def zone(name: str) -> ZoneInfo:
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError):
        raise ConfigError(
            f"--tz: unknown time zone '{name}' (use an IANA name such as Europe/Vienna)"
        ) from None


def iso_week(text: str, tz: str = "UTC") -> Window:
    """The window of ISO week ``YYYY-Www`` (Monday 00:00 to the next Monday 00:00 in ``tz``)."""
    match = _WEEK.match(text.strip())
    if not match:
        raise ConfigError(f"--week: '{text}' is not an ISO week; write it like 2026-W46")
    year, week = int(match.group(1)), int(match.group(2))
    try:
        monday = date.fromisocalendar(year, week, 1)
    except ValueError:
        raise ConfigError(f"--week: {year} has no week {week}") from None
    z = zone(tz)
    start = datetime.combine(monday, datetime.min.time(), z)
    return Window(f"{year}-W{week:02d}", start, start + timedelta(days=7))


def date_range(start: str, end: str, tz: str = "UTC") -> Window:
    """The window from day ``start`` to day ``end``, both included."""
    try:
        d0, d1 = date.fromisoformat(start), date.fromisoformat(end)
    except ValueError as exc:
        raise ConfigError(f"--from/--to: dates are written YYYY-MM-DD ({exc})") from None
    if d1 < d0:
        raise ConfigError(f"--to {end} is before --from {start}")
    z = zone(tz)
    s = datetime.combine(d0, datetime.min.time(), z)
    e = datetime.combine(d1 + timedelta(days=1), datetime.min.time(), z)
    return Window(f"{d0}_{d1}", s, e)


def week_of(instant: datetime, tz: str = "UTC") -> Window:
    """The ISO week containing ``instant``."""
    local = instant.astimezone(zone(tz))
    y, w, _ = local.isocalendar()
    return iso_week(f"{y}-W{w:02d}", tz)
