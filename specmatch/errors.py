"""The one exception type specmatch raises for input a user can fix."""

from __future__ import annotations


class SpecmatchError(ValueError):
    """Bad input or an impossible request, with a message a chemist can act on.

    The CLI prints ``specmatch: <message>`` on stderr and exits non-zero; the app
    shows the message in an error box. Nothing else should be raised for user input.
    """
