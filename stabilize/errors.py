"""The one exception type for problems a user can cause (bad input, bad options, bad paths)."""

__all__ = ["StabilizeError"]


class StabilizeError(Exception):
    """A problem the user can fix; its message is one plain line naming the file or option.

    The command line prints it as a single line and exits with status 2.
    """
