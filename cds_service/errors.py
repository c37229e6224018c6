"""Errors a caller can cause. The CLI prints them as one line; the service maps them to 4xx."""


class UserError(Exception):
    """Bad input from a user or caller: unreadable file, invalid JSON, wrong hook ..."""
