"""The one exception type the tool raises for bad input.

The command line turns :class:`ChannelizerError` into a single ``error:`` line
and exit status 2; anything else is a bug and keeps its traceback.
"""

import reprlib

__all__ = ["ChannelizerError", "shown"]


class ChannelizerError(ValueError):
    """Bad input: an impossible spec, a malformed file, an unknown format.

    The message names the file or field and says what is wrong, in one line.
    """


_REPR = reprlib.Repr()
_REPR.maxlevel, _REPR.maxstring, _REPR.maxother, _REPR.maxlong = 3, 200, 200, 200


def shown(value, limit=60):
    """``repr(value)`` cut to ``limit`` characters, for one-line messages.

    Nested containers are shown only a few levels and items deep, so that a value
    holding millions of references to one list (YAML aliases) or itself is shown
    at once.
    """
    text = _REPR.repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."
