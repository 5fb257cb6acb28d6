"""One error family for everything the user can get wrong.

Subclasses also inherit ValueError so callers may catch either.  The CLI turns
any ``EbgError`` into one line on stderr and exit code 2.
"""


class EbgError(ValueError):
    """Base class: bad input that the user can fix."""


class SpecError(EbgError):
    """A spec value is missing, of the wrong type or out of range.

    The message always names the key, the value and what is allowed, e.g.
    ``cut.slot = 0 mm: must be > 0 and < the patch size (3 mm)``.
    """

    def __init__(self, key: str, value: object, allowed: str):
        self.key, self.value, self.allowed = key, value, allowed
        super().__init__(f"{key} = {_show(value)}: {allowed}")


class PlacementError(EbgError):
    """The cells do not fit on the pair's path; the message gives the numbers."""


class BoardError(EbgError):
    """A board file cannot be read; the message carries file, line and column."""


def located(err: EbgError, where: str) -> EbgError:
    """The same error with ``where`` (e.g. which plan entry and pair) put in front of its message."""
    err.args = (f"{where}: {err}",) + err.args[1:]
    return err


def _show(value: object) -> str:
    if isinstance(value, str):
        return value if value else '""'
    if isinstance(value, float):
        return f"{value:g}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."
