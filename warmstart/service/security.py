"""Who may read and write through the service, and how much they may send.

- Writes (logging or deleting a study, repairing the history) need the write token as
  ``Authorization: Bearer <token>``; a server started without one takes no writes.
- With a read token every other route except ``/health`` and ``/openapi.json`` needs
  it (or the write token); browsers may send it as the password of HTTP Basic
  authentication, which they prompt for.
- Tokens are compared with :func:`hmac.compare_digest` (constant time). A refused
  request is answered 401 before its body is read, so nothing is written.
- Request bodies larger than the limit are refused with 413 before the application sees
  them, whether or not they announce their length.

All of it is one ASGI middleware, :class:`Guard`, in front of the application.
"""

from __future__ import annotations

import base64
import binascii
import hmac
import ipaddress
import json
import os
import stat
from pathlib import Path
from typing import Any

from warmstart.errors import BadInputError
from warmstart.service import wire

MIN_TOKEN_LENGTH = 16
DEFAULT_MAX_BODY_BYTES = 8 * 1024 * 1024
DRAIN_FACTOR = 4
OPEN_ROUTES = frozenset({"/health", "/openapi.json"})
WRITE_ROUTES = frozenset({("POST", "/api/log"), ("POST", "/api/check/repair"),
                          ("GET", "/api/write-access")})
BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})


def check_token(token: str | None, what: str) -> str | None:
    """``token`` stripped, or None; refuses one too short to resist guessing."""
    if token is None:
        return None
    token = token.strip()
    if not token:
        raise BadInputError(f"the {what} is empty")
    if len(token) < MIN_TOKEN_LENGTH:
        raise BadInputError(f"the {what} is shorter than {MIN_TOKEN_LENGTH} characters")
    if not token.isascii() or any(c.isspace() for c in token):
        raise BadInputError(f"the {what} must be printable ASCII without spaces")
    return token


def read_token_file(path: str | os.PathLike, what: str = "token") -> str:
    """The token in ``path``, a regular file that only its owner may read or write."""
    p = Path(path)
    try:
        st = p.stat()
    except FileNotFoundError:
        raise BadInputError(f"{what} file not found: {p}") from None
    except OSError as exc:
        raise BadInputError(f"cannot read the {what} file {p}: {exc.strerror}") from None
    if not stat.S_ISREG(st.st_mode):
        raise BadInputError(f"the {what} file {p} is not a regular file")
    if st.st_mode & 0o077:
        raise BadInputError(f"the {what} file {p} is open to other users (mode "
                            f"{stat.S_IMODE(st.st_mode):04o}); make it private with "
                            f"chmod 600 {p}")
    if hasattr(os, "getuid") and st.st_uid != os.getuid():
        raise BadInputError(f"the {what} file {p} belongs to another user")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        raise BadInputError(f"cannot read the {what} file {p}") from None
    return check_token(text, f"{what} in {p}")


def is_loopback(host: str) -> bool:
    """Whether ``host`` (a name or an address) is this machine only."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def exposure_warnings(host: str, token: str | None, read_token: str | None) -> list[str]:
    """Warnings for a server reachable beyond this machine (one line each)."""
    if is_loopback(host):
        return []
    out = []
    if read_token is None:
        out.append(f"serving on {host} beyond loopback without a read token: anyone who "
                   "can reach it can read the history (use --read-token-file)")
    if token is None and read_token is None:
        out.append("no token at all: the server takes no writes")
    out.append("tokens cross the network in clear text: put a TLS proxy in front of it")
    return out


def _presented(headers: dict[bytes, bytes]) -> str | None:
    """The token of an ``Authorization`` header: Bearer, or Basic's password."""
    value = headers.get(b"authorization", b"").decode("latin-1").strip()
    scheme, _, rest = value.partition(" ")
    if scheme.lower() == "bearer":
        return rest.strip() or None
    if scheme.lower() == "basic":
        try:
            decoded = base64.b64decode(rest.strip(), validate=True).decode("utf-8")
        except (binascii.Error, UnicodeDecodeError):
            return None
        return decoded.partition(":")[2] or None
    return None


def _matches(given: str | None, expected: str | None) -> bool:
    if given is None or expected is None:
        return False
    return hmac.compare_digest(given.encode("utf-8"), expected.encode("utf-8"))


class Guard:
    """ASGI middleware: tokens, body size limit and protective response headers.

    Parameters
    ----------
    app : ASGI application
    token : str, optional
        The write token (None: no writes).
    read_token : str, optional
        The read token (None: reads are open).
    max_body_bytes : int
    headers : list of (bytes, bytes)
        Added to every response (e.g. the content security policy).
    """

    def __init__(self, app, *, token: str | None, read_token: str | None,
                 max_body_bytes: int = DEFAULT_MAX_BODY_BYTES,
                 headers: list[tuple[bytes, bytes]] | None = None):
        self.app = app
        self.token, self.read_token = token, read_token
        self.max_body_bytes = int(max_body_bytes)
        self.extra = list(headers or [])

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        send = self._with_headers(send)
        headers = dict(scope.get("headers") or [])
        refusal = self._refusal(scope["method"], scope["path"], headers)
        if refusal is not None:
            return await _send_json(send, *refusal)
        if scope["method"] in BODY_METHODS:
            body = await self._read_body(headers, receive)
            if isinstance(body, tuple):
                return await _send_json(send, *body)
            receive = _replay(body, receive)
        return await self.app(scope, receive, send)

    def _refusal(self, method: str, path: str, headers) -> tuple | None:
        """(status, payload, headers) when the request must be refused, else None."""
        given = _presented(headers)
        challenge = [(b"www-authenticate", b'Bearer realm="warmstart"' if
                      path.startswith("/api/") else b'Basic realm="warmstart", charset="UTF-8"')]
        if (method, path) in WRITE_ROUTES or method == "DELETE":  # every DELETE writes
            if self.token is None:
                return (403, {"error": "this server takes no writes: it was started "
                              "without a write token", "kind": wire.WRITES_DISABLED}, [])
            if not _matches(given, self.token):
                return (401, {"error": _why(given, "write"), "kind": wire.UNAUTHORISED},
                        challenge)
        elif path not in OPEN_ROUTES and self.read_token is not None:
            if not (_matches(given, self.read_token) or _matches(given, self.token)):
                return (401, {"error": _why(given, "read"), "kind": wire.UNAUTHORISED},
                        challenge)
        return None

    async def _read_body(self, headers, receive) -> bytes | tuple:
        """The whole body, or the (status, payload, headers) refusing it.

        A body over the limit is read on and dropped up to ``DRAIN_FACTOR`` times the
        limit before the 413 goes out, so that a client still sending sees the answer
        instead of a reset connection; one announcing more than that is answered at once.
        """
        too_large = (413, {"error": f"request body larger than {self.max_body_bytes} bytes",
                           "kind": wire.TOO_LARGE}, [])
        length = headers.get(b"content-length")
        if length is not None:
            try:
                announced = int(length)
            except ValueError:
                return (400, {"error": "bad Content-Length header",
                              "kind": wire.INVALID_REQUEST}, [])
            if announced > DRAIN_FACTOR * self.max_body_bytes:
                return too_large
        chunks, size = [], 0
        while True:
            message = await receive()
            if message["type"] == "http.disconnect":
                break
            chunk = message.get("body", b"")
            size += len(chunk)
            if size <= self.max_body_bytes:
                chunks.append(chunk)
            elif size > DRAIN_FACTOR * self.max_body_bytes:
                return too_large
            if not message.get("more_body", False):
                break
        return too_large if size > self.max_body_bytes else b"".join(chunks)

    def _with_headers(self, send):
        async def wrapped(message):
            if message["type"] == "http.response.start":
                message = dict(message)
                message["headers"] = list(message.get("headers", [])) + self.extra
            await send(message)

        return wrapped


def _why(given: str | None, what: str) -> str:
    if given is None:
        return f"this request needs the {what} token (Authorization: Bearer TOKEN)"
    return f"wrong token for {what}s"


def _replay(body: bytes, receive):
    """A ``receive`` that yields the already-read body once, then defers to the original."""
    sent = False

    async def replay():
        nonlocal sent
        if not sent:
            sent = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await receive()

    return replay


async def _send_json(send, status: int, payload: dict[str, Any],
                     headers: list[tuple[bytes, bytes]]) -> None:
    body = json.dumps(payload).encode()
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"),
                            (b"content-length", str(len(body)).encode())] + headers})
    await send({"type": "http.response.body", "body": body})
