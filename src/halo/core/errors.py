"""The one exception type for bad user input.

Its message is a single line naming the file and the key, row or column at fault; the command
line turns it into that line on stderr and exit code 2, without a traceback.
"""

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad input from the user (file content, option value)."""

    def __init__(self, message):
        super().__init__(" ".join(str(message).split()))
