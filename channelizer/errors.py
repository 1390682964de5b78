"""The one exception type the tool raises for bad input.

The command line turns :class:`ChannelizerError` into a single ``error:`` line
and exit status 2; anything else is a bug and keeps its traceback.
"""

__all__ = ["ChannelizerError"]


class ChannelizerError(ValueError):
    """Bad input: an impossible spec, a malformed file, an unknown format.

    The message names the file or field and says what is wrong, in one line.
    """
