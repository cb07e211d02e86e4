"""Warnings whose words depend on the caller's direction. The core computes in the forward
vocabulary and names such a warning by a code (``Note``) or, for the audit, by the path of
the figure it concerns (``Finding``); the web layer writes them for the caller
(service/web/wording.py). Both are strings (their forward reading), so a warning list
stays a list of strings wherever it goes."""
from __future__ import annotations


class Note(str):
    """A warning named by its ``code``, written per direction by the web layer, with the
    ``fields`` its words hold (a count, a p-value)."""

    def __new__(cls, code, **fields):
        self = super().__new__(cls, code)
        self.code, self.fields = code, fields
        return self


class Finding(str):
    """An audit's finding about the figure at ``path`` (dot-separated keys and indices, in
    the forward vocabulary), followed by ``text``."""

    def __new__(cls, path, text):
        self = super().__new__(cls, f"{path} {text}")
        self.path, self.text = path, text
        return self
