"""Errors of the HTTP service and its client, on top of :mod:`warmstart.errors`.

The CLI maps them like every other :class:`~warmstart.errors.WarmstartError`: a bad
server URL or a refused token is bad input (exit 2); a server that is down, unreachable
or failing is exit 1.
"""

from __future__ import annotations

from warmstart.errors import BadInputError, WarmstartError


class ServiceUnavailableError(WarmstartError):
    """The server could not be reached, timed out, or failed to answer."""

    exit_code = 1


class NotAuthorisedError(BadInputError):
    """The server refused the request's token (missing, wrong, or writes disabled)."""

    exit_code = 2


__all__ = ["NotAuthorisedError", "ServiceUnavailableError"]
