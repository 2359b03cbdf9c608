"""The one exception family the command line reports as bad input (exit code 2)."""


class InputError(Exception):
    """Input that cannot be used. ``str()`` is a single line naming the file and key."""
