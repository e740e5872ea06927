"""The one error type for bad input (shared by the readers of files and of entries)."""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: the message is one line that names the file or column and what to do."""
