"""Printers and converters that turn fitted models into the bundle's portable files."""
