"""The one exception type for mistakes a user can fix (bad config, bad file, impossible selection)."""


class UserError(Exception):
    """A problem in the user's input, reported as one line without a traceback.

    The message names the culprit (file, config key or value), says what was
    expected, and what to do about it.
    """
