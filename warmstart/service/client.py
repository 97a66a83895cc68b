"""A client of ``warmstart serve`` with the methods and results of ``KnowledgeBase``.

Fingerprints are computed on the caller's machine and only the fingerprint (and, to
log a study, its trials) is sent: rows of data never leave the machine. Only the
standard library speaks HTTP here, so the client needs no extra package.

Errors are the library's own: a malformed URL, an unresolvable host or a refused token
raises :class:`~warmstart.errors.BadInputError` (CLI exit 2); a server that is down,
times out or fails raises :class:`~warmstart.service.errors.ServiceUnavailableError`
(exit 1); the server's answers to bad input and to "nothing to suggest" come back as
:class:`~warmstart.errors.BadInputError` and
:class:`~warmstart.errors.NothingToSuggestError` with the server's one-line message. A
request is never retried, so a write is never sent twice.
"""

from __future__ import annotations

import json
import os
import socket
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path
from typing import Any

from warmstart.backtest import DEFAULT_KS, BacktestResult
from warmstart.errors import BadInputError, NothingToSuggestError
from warmstart.fingerprint import Fingerprint
from warmstart.history import LoggedStudy, query_fingerprint
from warmstart.io import read_json_file
from warmstart.maintenance import CheckReport
from warmstart.service import wire
from warmstart.service.errors import NotAuthorisedError, ServiceUnavailableError
from warmstart.service.security import is_loopback
from warmstart.similarity import Neighbour
from warmstart.spaces import SearchSpace
from warmstart.strategies import Suggestion
from warmstart.trials import TrialsInput

TOKEN_ENV = "WARMSTART_TOKEN"
SERVER_ENV = "WARMSTART_SERVER"
DEFAULT_TIMEOUT = 120.0  # seconds; a backtest on a large history takes a while


def _check_url(url: str) -> str:
    if not isinstance(url, str) or not url.strip():
        raise BadInputError("the server URL is empty")
    parts = urllib.parse.urlsplit(url.strip())
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise BadInputError(f"bad server URL {url!r}: expected http://HOST:PORT")
    try:
        parts.port  # noqa: B018 - raises on a malformed port
    except ValueError:
        raise BadInputError(f"bad server URL {url!r}: the port is not a number") from None
    if parts.query or parts.fragment:
        raise BadInputError(f"bad server URL {url!r}: no query or fragment expected")
    return url.strip().rstrip("/")


class Client:
    """The team history behind a ``warmstart serve`` server.

    Parameters
    ----------
    url : str
        The server, e.g. ``http://127.0.0.1:8765``.
    token : str, optional
        Bearer token for writes (and for reads when the server protects them); defaults
        to ``$WARMSTART_TOKEN``.
    timeout : float
        Seconds to wait for an answer.

    The methods take the same arguments as :class:`~warmstart.history.KnowledgeBase`'s
    and return the same types.
    """

    def __init__(self, url: str, token: str | None = None, timeout: float = DEFAULT_TIMEOUT):
        self.url = _check_url(url)
        self.path = self.url  # where the history is, as KnowledgeBase.path says
        self.token = token if token is not None else (os.environ.get(TOKEN_ENV) or None)
        self.timeout = float(timeout)
        host = urllib.parse.urlsplit(self.url).hostname or ""
        # a proxy set in the environment must not see loopback traffic
        handlers = [urllib.request.ProxyHandler({})] if is_loopback(host) else []
        self._opener = urllib.request.build_opener(*handlers)

    def __repr__(self) -> str:
        return f"Client({self.url!r})"

    # -- transport ------------------------------------------------------------------------
    def request(self, method: str, path: str, body: Any = None,
                params: dict[str, Any] | None = None, raw: bool = False) -> Any:
        """Send one request; return the decoded JSON answer (``raw``: the text)."""
        query = {k: v for k, v in (params or {}).items() if v is not None}
        url = self.url + path + ("?" + urllib.parse.urlencode(query) if query else "")
        data = None if body is None else json.dumps(wire.jsonable(body),
                                                    allow_nan=False).encode()
        req = urllib.request.Request(url, data=data, method=method)
        req.add_header("Accept", "application/json")
        if data is not None:
            req.add_header("Content-Type", "application/json")
        if self.token:
            req.add_header("Authorization", f"Bearer {self.token}")
        try:
            with self._opener.open(req, timeout=self.timeout) as resp:
                text = resp.read().decode("utf-8")
        except urllib.error.HTTPError as exc:
            raise self._answer_error(exc) from None
        except urllib.error.URLError as exc:
            raise self._network_error(exc.reason) from None
        except (OSError, TimeoutError) as exc:
            raise self._network_error(exc) from None
        if raw:
            return text
        try:
            return json.loads(text)
        except ValueError:
            raise ServiceUnavailableError(
                f"{self.url} did not answer like a warmstart server (not JSON)") from None

    def _network_error(self, reason: Any) -> Exception:
        if isinstance(reason, socket.gaierror):
            host = urllib.parse.urlsplit(self.url).hostname
            return BadInputError(f"bad server URL {self.url}: cannot resolve host {host!r}")
        if isinstance(reason, ConnectionRefusedError):
            why = "connection refused (is 'warmstart serve' running there?)"
        elif isinstance(reason, (TimeoutError, socket.timeout)):
            why = f"no answer within {self.timeout:g} s"
        else:
            why = str(getattr(reason, "strerror", None) or reason)
        return ServiceUnavailableError(f"cannot reach the warmstart server at {self.url}: {why}")

    def _answer_error(self, exc: urllib.error.HTTPError) -> Exception:
        try:
            answer = json.loads(exc.read().decode("utf-8"))
            message, kind = str(answer["error"]), str(answer.get("kind", ""))
        except (ValueError, KeyError, TypeError, OSError):
            message, kind = f"HTTP {exc.code} {exc.reason}", ""
        if exc.code in (401, 403):
            hint = "" if self.token else f"; none was given: set ${TOKEN_ENV}"
            return NotAuthorisedError(message + hint)
        if kind == wire.NOTHING_TO_SUGGEST:
            return NothingToSuggestError(message)
        if exc.code >= 500:
            return ServiceUnavailableError(f"the warmstart server at {self.url} failed: "
                                           f"{message}")
        return BadInputError(message)

    # -- the KnowledgeBase methods ----------------------------------------------------------
    def health(self) -> dict[str, Any]:
        """The server's status: version, history format, whether it takes writes."""
        return self.request("GET", "/health")

    def info(self) -> dict[str, Any]:
        """See :meth:`KnowledgeBase.info`."""
        got = self.request("GET", "/api/info")
        # JSON object keys are text; the directory's answer keys versions by int
        versions = got.get("fingerprints_by_catalogue_version", {})
        got["fingerprints_by_catalogue_version"] = {int(k): v for k, v in versions.items()}
        return got

    def tables(self, family: str | None = None, task: str | None = None) -> dict[str, Any]:
        """See :meth:`KnowledgeBase.tables` (the three tables as DataFrames)."""
        got = self.request("GET", "/api/tables", params={"family": family, "task": task})
        return {name: wire.frame_from_wire(d) for name, d in got.items()}

    def fingerprints(self, datasets=None) -> dict[str, Fingerprint]:
        """Stored fingerprints by dataset id (of ``datasets``' rows when given)."""
        got = self.request("GET", "/api/fingerprints")
        keep = None if datasets is None else set(datasets["dataset_id"])
        return {i: wire.stored_fingerprint(d) for i, d in got.items()
                if keep is None or i in keep}

    def similar(self, data=None, *, target: str | None = None, k: int = 5,
                task: str | None = None, fingerprint_of=None) -> list[Neighbour]:
        """See :meth:`KnowledgeBase.similar`; the fingerprint is computed here."""
        if k < 1:
            raise BadInputError("k must be at least 1")
        fp = query_fingerprint(data, target, task, fingerprint_of)
        got = self.request("POST", "/api/similar", {"fingerprint": fp.to_dict(), "k": k})
        return [wire.neighbour_from_dict(d) for d in got]

    def suggest(self, data=None, *, target: str | None = None, family: str, k: int = 10,
                task: str | None = None, metric: str | None = None,
                strategy: str | None = None, space=None,
                max_fit_seconds: float | None = None, seed: int = 0,
                fingerprint_of=None) -> list[Suggestion]:
        """See :meth:`KnowledgeBase.suggest`; the fingerprint is computed here."""
        if k < 1:
            raise BadInputError("k must be at least 1")
        fp = query_fingerprint(data, target, task, fingerprint_of)
        body = {"fingerprint": fp.to_dict(), "family": family, "k": k, "metric": metric,
                "strategy": strategy, "space": _space_spec(space),
                "max_fit_seconds": max_fit_seconds, "seed": seed}
        got = self.request("POST", "/api/suggest", body)
        return [wire.suggestion_from_dict(d) for d in got]

    def log(self, data=None, *, target: str | None = None, family: str,
            trials: TrialsInput, metric: str | None = None, better: str | None = None,
            name: str | None = None, fingerprint_of=None, task: str | None = None,
            source: str = "log") -> LoggedStudy:
        """See :meth:`KnowledgeBase.log`: sends the fingerprint and the trials only."""
        fp = query_fingerprint(data, target, task, fingerprint_of)
        # a new dataset is labelled by the file's name, as on the directory; a known one
        # keeps its name unless ``name`` is given
        file_name = Path(data).stem if isinstance(data, (str, os.PathLike)) else None
        body = {"fingerprint": fp.to_dict(), "family": family,
                "trials": wire.trials_to_wire(trials), "metric": metric,
                "better": better, "name": name, "file_name": file_name, "task": task,
                "source": source}
        return wire.logged_from_dict(self.request("POST", "/api/log", body))

    def check(self, repair: bool = False, grace_seconds: float | None = None) -> CheckReport:
        """See :meth:`KnowledgeBase.check`; ``repair`` needs the write token."""
        params = {"grace_seconds": grace_seconds}
        got = (self.request("POST", "/api/check/repair", {}, params=params) if repair
               else self.request("GET", "/api/check", params=params))
        return wire.check_from_dict(got)

    def backtest(self, family: str, ks=DEFAULT_KS, strategies=None, *,
                 metric: str | None = None, seed: int = 0,
                 random_repeats: int = 10) -> BacktestResult:
        """What :func:`warmstart.backtest.backtest` gives on the server's history."""
        params = {"ks": ",".join(str(int(k)) for k in ks),
                  "strategies": None if strategies is None else ",".join(strategies),
                  "metric": metric, "seed": seed, "random_repeats": random_repeats}
        return wire.backtest_from_dict(self.request("GET", f"/api/backtest/{family}",
                                                    params=params))

    def _check_writable(self) -> None:
        """Raise unless this client's token may write (as the directory checks permissions
        before a long run that ends in a log); writes nothing."""
        if not self.token:
            raise NotAuthorisedError(f"writing to {self.url} needs a token: set "
                                     f"${TOKEN_ENV}")
        self.request("GET", "/api/write-access")

    def _directory_only(self, what: str):
        raise BadInputError(f"{what} works on the history's directory, not through a "
                            f"server: run it on the machine that holds the history")

    def compact(self):
        self._directory_only("kb compact")

    def export(self, file):
        self._directory_only("kb export")

    def import_(self, file):
        self._directory_only("kb import")

    def list_studies(self) -> list[dict[str, Any]]:
        """See :meth:`KnowledgeBase.list_studies`."""
        return self.request("GET", "/api/records")

    def show(self, ref: str) -> dict[str, Any]:
        """See :meth:`KnowledgeBase.show`."""
        return self.request("GET", f"/api/records/{urllib.parse.quote(ref, safe='')}")

    def delete(self, ref: str) -> dict[str, Any]:
        """See :meth:`KnowledgeBase.delete`; needs the write token."""
        return self.request("DELETE", f"/api/records/{urllib.parse.quote(ref, safe='')}")


def _space_spec(space) -> list | None:
    if space is None:
        return None
    if isinstance(space, SearchSpace):
        return space.to_dict()
    if isinstance(space, (str, os.PathLike)):
        return read_json_file(space, "search-space")
    return space


__all__ = ["Client", "SERVER_ENV", "TOKEN_ENV", "query_fingerprint"]
