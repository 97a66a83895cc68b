"""The team history as a service: an HTTP API, its client, the map and the report.

- :class:`Client` (also ``warmstart.Client``): the methods of
  :class:`~warmstart.history.KnowledgeBase` against a server; standard library only.
- :func:`warmstart.service.app.create_app` / :func:`~warmstart.service.app.serve`: the
  server (needs the ``serve`` extra: FastAPI and uvicorn).
- :func:`warmstart.service.maps.map`: the similarity map as SVG or PNG.
- :func:`warmstart.service.report.report`: one self-contained HTML report of a dataset.
"""

from warmstart.service.client import Client
from warmstart.service.errors import NotAuthorisedError, ServiceUnavailableError

__all__ = ["Client", "NotAuthorisedError", "ServiceUnavailableError"]
