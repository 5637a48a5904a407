"""Errors that the command line turns into exit codes.

A user-facing problem is raised as :class:`InputError`; the CLI prints its message on one
``error:`` line and exits 2. Anything else is a bug and keeps its traceback under ``--debug``.
"""
from __future__ import annotations

import argparse


class InputError(Exception):
    """Bad input or usage: the message names the file/column/value and says what to do."""


class BundleError(InputError):
    """A bundle that cannot be trusted or read (missing file, checksum mismatch, bad manifest)."""


class OneLineParser(argparse.ArgumentParser):
    """Usage mistakes become an :class:`InputError` (one `error:` line and exit 2, like every other
    bad input) instead of argparse's usage text."""

    def error(self, message: str) -> None:  # type: ignore[override]
        raise InputError(f"{message} (see `{self.prog} --help`)")
