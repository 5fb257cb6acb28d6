"""One error family for everything the user can get wrong.

Subclasses also inherit ValueError so callers may catch either.  The CLI turns
any ``EbgError`` into one line on stderr and exit code 2.
"""
import math


class EbgError(ValueError):
    """Base class: bad input that the user can fix."""


class SpecError(EbgError):
    """A spec value is missing, of the wrong type or out of range.

    The message always names the key, the value and what is allowed, e.g.
    ``cut.slot = 0 mm: must be > 0 and < the patch size (3 mm)``.
    """

    def __init__(self, key: str, value: object, allowed: str):
        self.key, self.value, self.allowed = key, value, allowed
        super().__init__(f"{show_key(key)} = {show(value)}: {allowed}")


class PlacementError(EbgError):
    """The cells do not fit on the pair's path; the message gives the numbers."""


class BoardError(EbgError):
    """A board file cannot be read; the message carries file, line and column."""


def check_positive(**values: float) -> None:
    """Refuse any value that is not a finite number > 0 (a bool is not a number here), naming its key."""
    for key, value in values.items():
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
            raise EbgError(f"{key} = {value!r}: must be a finite number > 0")


def located(err: EbgError, where: str) -> EbgError:
    """The same error with ``where`` (e.g. which plan entry and pair) put in front of its message."""
    err.args = (f"{where}: {err}",) + err.args[1:]
    return err


SHOWN_CHARS = 60
"""Values longer than this are shortened with an ellipsis, so an error stays one readable line."""


def show(value: object) -> str:
    """A value as one short line: control characters escaped, long text shortened."""
    if isinstance(value, str):
        return shorten(one_line(value)) if value else '""'
    if isinstance(value, float):
        return f"{value:g}"
    try:
        text = repr(value)
    except RecursionError:
        text = f"<{type(value).__name__} nested too deeply>"
    return shorten(one_line(text))


def show_key(key: str) -> str:
    """A dotted key as TOML spells it, with an empty part written as "" and named."""
    parts = key.split(".")
    if all(parts):
        return shorten(one_line(key), 2 * SHOWN_CHARS)
    return ".".join(one_line(p) if p else '""' for p in parts) + " (the empty key)"


def one_line(text: str) -> str:
    """``text`` with every control character (newline, NUL, escape, ...) written as a visible escape."""
    return "".join(c if c.isprintable() or c == " " else c.encode("unicode_escape").decode("ascii") for c in text)


def shorten(text: str, limit: int = SHOWN_CHARS) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."
