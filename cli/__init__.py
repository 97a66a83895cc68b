"""The ``warmstart`` command line: a thin click layer over :mod:`warmstart`."""
