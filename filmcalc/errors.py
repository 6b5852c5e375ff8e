"""The one exception type for errors a user can cause.

Every message says what was wrong and how to fix it; the dashboard shows it
as it is and the command line prints it without a traceback.
"""


class FilmcalcError(ValueError):
    """A problem with the user's input (file, material, range, setting)."""
