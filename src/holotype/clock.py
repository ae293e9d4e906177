"""When and by whom: the time written into locks and history (SOURCE_DATE_EPOCH honoured) and the user's name."""

from __future__ import annotations

import getpass
import os
from datetime import UTC, datetime

from holotype.errors import ConfigError


def timestamp() -> str:
    """UTC time now, or SOURCE_DATE_EPOCH when set (for byte-reproducible locks)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if not epoch:
        moment = datetime.now(UTC)
    else:
        try:
            moment = datetime.fromtimestamp(int(epoch), UTC)
        except (ValueError, OverflowError, OSError):
            raise ConfigError(f"SOURCE_DATE_EPOCH={epoch[:40]!r} is not a time holotype can write; set it to whole "
                              "seconds since 1970 (before the year 10000) or unset it") from None
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def current_user() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"


def epoch_now() -> int:
    """Whole seconds since 1970 now, or SOURCE_DATE_EPOCH when set: what a record's analyses run with."""
    stamp = timestamp()  # validates SOURCE_DATE_EPOCH
    return int(datetime.strptime(stamp, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=UTC).timestamp())
