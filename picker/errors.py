"""The one exception type for mistakes a user can make.

This module is a leaf: every package may import it, it imports nothing of picker.
"""


class PickerError(Exception):
    """A user-caused error whose message is fit to print as one line.

    The CLI prints ``str(err)`` to stderr and exits with ``err.exit_code``.
    """

    exit_code = 2

    def __init__(self, message: str, *, exit_code: int | None = None):
        super().__init__(message)
        if exit_code is not None:
            self.exit_code = exit_code
