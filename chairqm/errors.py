"""The one exception type for problems a user can fix (bad configuration, bad molecule)."""


class ChairqmError(Exception):
    """An input problem. The message says what is wrong and what to change; no traceback is shown."""
