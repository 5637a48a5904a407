"""Errors that the command line turns into exit codes.

A user-facing problem is raised as :class:`InputError`; the CLI prints its message on one
``error:`` line and exits 2. Anything else is a bug and keeps its traceback under ``--debug``.
"""
from __future__ import annotations


class InputError(Exception):
    """Bad input or usage: the message names the file/column/value and says what to do."""


class BundleError(InputError):
    """A bundle that cannot be trusted or read (missing file, checksum mismatch, bad manifest)."""
