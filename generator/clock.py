"""The one place the build learns the date: SOURCE_DATE_EPOCH (UTC), else the system date."""
from __future__ import annotations

import datetime as dt
import logging
import os

log = logging.getLogger(__name__)


def source_date() -> dt.date | None:
    """Return the UTC date of SOURCE_DATE_EPOCH, or None when it is unset or unreadable."""
    raw = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if not raw:
        return None
    try:
        return dt.datetime.fromtimestamp(int(raw), tz=dt.timezone.utc).date()
    except (ValueError, OverflowError, OSError):
        log.warning("SOURCE_DATE_EPOCH=%r is not a whole number of seconds; ignored", raw)
        return None


def today() -> dt.date:
    """Return the date future records are judged against: SOURCE_DATE_EPOCH or the system date."""
    return source_date() or dt.date.today()
