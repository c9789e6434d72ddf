"""The one exception type for bad input, plus the failure type for a single sweep item."""
from __future__ import annotations


class InputError(ValueError):
    """Bad input from the user: a file, a config field, a target object.

    The message names *where* (file), *what* (field) and the offending *value*, so the CLI can
    print it on one line and exit with code 2.
    """

    def __init__(self, message: str, *, source: str | None = None, field: str | None = None,
                 value: object = None) -> None:
        self.source = source
        self.field = field
        self.value = value
        message = " / ".join(x.strip() for x in str(message).splitlines() if x.strip())   # one line
        parts = []
        if source:
            parts.append(str(source))
        if field:
            parts.append(f"field '{field}'")
        where = ": ".join(parts)
        shown = "" if value is None else f" (got {value!r})"
        super().__init__(f"{where}: {message}{shown}" if where else f"{message}{shown}")


class RunFailed(RuntimeError):
    """A sweep finished, but too many of its items failed to trust it (CLI exit code 1)."""


class ItemFailure(RuntimeError):
    """One sweep item failed (vocoder raised, timed out, returned bad audio). The sweep goes on."""


class MetricUnavailable(RuntimeError):
    """A metric cannot be computed for this item; the value becomes NaN with this reason."""
