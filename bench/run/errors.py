"""Invalid input found while planning a run: a message for the user, exit code 2, nothing run."""

from __future__ import annotations


class InvalidInput(Exception):
    """Bad input (an unknown controller, an ``--only`` id that matches nothing, a results folder that
    cannot be written): printed as it is, exit code 2, and nothing has been run or written."""
