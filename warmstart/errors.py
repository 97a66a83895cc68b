"""Exceptions raised at the library's boundaries.

The CLI maps each to an exit code: :class:`BadInputError` to 2 (nothing was written),
:class:`NothingToSuggestError` to 1.
"""


class WarmstartError(Exception):
    """Base class for every error warmstart raises on purpose."""

    exit_code = 2


class BadInputError(WarmstartError, ValueError):
    """The user's input (a file, a trials table, a parameter, a path) is unusable.

    Raised before anything is written, so the history is unchanged.
    """

    exit_code = 2


class NothingToSuggestError(WarmstartError):
    """The history holds nothing that answers the question (no study of the family...)."""

    exit_code = 1
