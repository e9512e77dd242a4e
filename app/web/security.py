"""Who may talk to the server: Host allow-list, same-origin writes, access token, small bodies.

One ASGI middleware, :class:`RequestGuard`, outermost in the stack so a refused
request is answered before any body is read:

- Host header (DNS rebinding). A page on ``evil.example`` whose name an attacker
  re-points at 127.0.0.1 reaches us with ``Host: evil.example``; only loopback
  names, the bound host and (when bound to a wildcard address) IP literals and
  this machine's own names are served. IP literals are safe because rebinding
  needs a DNS name the attacker controls.
- Origin of state-changing requests (POST, PUT, PATCH, DELETE). A browser sends
  ``Origin`` (or at least ``Referer``) with cross-site form posts and fetches;
  when present it must name this server's own origin. Without either (curl, the
  CLI, scripts) the request is allowed: such a client is not a browser tricked
  by a web page.
- Access token when bound beyond loopback. ``?token=...`` on a page is exchanged
  for an HttpOnly SameSite=Strict cookie (and the token dropped from the
  address bar by a redirect); the API also takes ``Authorization: Bearer``.
- Bodies of non-upload requests are capped (JSON settings are small), so a
  client cannot make the server buffer an unbounded body; uploads have their
  own limit (:class:`pairlens.web.app.UploadLimit`).
"""

from __future__ import annotations

import ipaddress
import json
import secrets
import socket
from http.cookies import SimpleCookie
from urllib.parse import parse_qsl, urlencode, urlsplit

from .. import config

__all__ = ["RequestGuard", "TOKEN_COOKIE", "token_cookie_name", "LOOPBACK_NAMES", "is_loopback_host", "new_token", "access_link"]

# Cookies are not kept apart by port, so each server names its own (two servers on
# one machine would otherwise overwrite each other's token).
TOKEN_COOKIE = "pairlens_token"


def token_cookie_name(port: int) -> str:
    return f"{TOKEN_COOKIE}_{int(port)}"
LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")
_WILDCARDS = ("0.0.0.0", "::", "")
_UNSAFE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
# Headers added to every response: no framing (clickjacking), no MIME sniffing, no
# Referer sent to other sites. Not "no-referrer": under that policy browsers send
# "Origin: null" with same-origin form posts (Fetch standard, "serializing a request
# origin"), which the Origin check would refuse.
_SECURITY_HEADERS = [
    (b"x-content-type-options", b"nosniff"),
    (b"x-frame-options", b"DENY"),
    (b"referrer-policy", b"same-origin"),
    (b"content-security-policy", b"frame-ancestors 'none'; base-uri 'none'; object-src 'none'; form-action 'self'"),
]


def is_loopback_host(host: str) -> bool:
    """True for names and addresses that only this machine can reach."""
    h = host.strip("[]").lower()
    if h == "localhost":
        return True
    try:
        return ipaddress.ip_address(h).is_loopback
    except ValueError:
        return False


def new_token() -> str:
    return secrets.token_urlsafe(24)


def _url_host(host: str) -> str:
    return f"[{host}]" if ":" in host and not host.startswith("[") else host


def access_link(host: str, port: int, token: str | None) -> str:
    """The address to open; for a wildcard bind, this machine's name stands in for the host."""
    shown = socket.gethostname() if host in _WILDCARDS else host
    link = f"http://{_url_host(shown)}:{port}/"
    return link + (f"?token={token}" if token else "")


def _split_host(value: str) -> tuple[str, int | None] | None:
    """``host[:port]`` of a Host header or URL netloc -> (lower-case host without brackets, port)."""
    value = value.strip().lower()
    if not value:
        return None
    if value.startswith("["):
        end = value.find("]")
        if end < 0:
            return None
        host, rest = value[1:end], value[end + 1:]
        if rest and not rest.startswith(":"):
            return None
        port_text = rest[1:] if rest else ""
    elif value.count(":") == 1:
        host, port_text = value.split(":")
    elif ":" in value:  # a bare IPv6 address is not a valid Host header
        return None
    else:
        host, port_text = value, ""
    if port_text:
        if not port_text.isdigit() or not (0 < int(port_text) < 65536):
            return None
        return host, int(port_text)
    return host, None


def _own_names() -> set[str]:
    names = {socket.gethostname().lower()}
    try:
        names.add(socket.getfqdn().lower())
    except OSError:  # pragma: no cover - resolver trouble only
        pass
    return {n for n in names if n}


def _header(scope, name: bytes) -> str | None:
    for k, v in scope.get("headers", ()):
        if k == name:
            return v.decode("latin-1")
    return None


def _in_process(scope) -> bool:
    # Starlette's TestClient calls the app directly, without a socket, and names the
    # client "testclient"; such a call cannot come from a browser, so its default
    # host name "testserver" is accepted. A real connection always has an IP address.
    client = scope.get("client")
    return bool(client) and client[0] == "testclient"


class RequestGuard:
    """ASGI middleware enforcing the rules in the module docstring.

    Parameters
    ----------
    app : ASGI application
    host : str
        The address the server is bound to.
    port : int
        The port it listens on (origins must name it).
    token : str, optional
        Required on every request when given (servers bound beyond loopback).
    max_body_bytes : int
        Largest body accepted on paths other than ``upload_paths``.
    upload_paths : tuple of str
        Paths whose bodies are limited elsewhere.
    """

    def __init__(self, app, *, host: str = config.DEFAULT_HOST, port: int = config.DEFAULT_PORT,
                 token: str | None = None, max_body_bytes: int = config.MAX_REQUEST_BODY_KB * 1024,
                 upload_paths: tuple[str, ...] = ()) -> None:
        self.app = app
        self.port = int(port)
        self.token = token or None
        self.max_body_bytes = int(max_body_bytes)
        self.upload_paths = tuple(upload_paths)
        bound = host.strip("[]").lower()
        self.wildcard = bound in _WILDCARDS
        self.allowed_names = set(LOOPBACK_NAMES)
        if not self.wildcard:
            self.allowed_names.add(bound)
        else:
            self.allowed_names |= _own_names()

    # Checks ---------------------------------------------------------------------

    def _host_ok(self, scope, parsed: tuple[str, int | None] | None) -> bool:
        if parsed is None:
            return False
        host, _port = parsed
        if host in self.allowed_names:
            return True
        if host == "testserver" and _in_process(scope):
            return True
        if self.wildcard:
            try:
                ipaddress.ip_address(host)
                return True
            except ValueError:
                return False
        return False

    @staticmethod
    def _origin_matches(origin: str, scheme: str, host_header: str) -> bool:
        parts = urlsplit(origin)
        if parts.scheme not in ("http", "https") or not parts.netloc:
            return False
        own = _split_host(host_header)
        theirs = _split_host(parts.netloc)
        if own is None or theirs is None:
            return False
        default = 443 if parts.scheme == "https" else 80
        own_default = 443 if scheme == "https" else 80
        return (parts.scheme == scheme and own[0] == theirs[0]
                and (theirs[1] or default) == (own[1] or own_default))

    def _origin_ok(self, scope, host_header: str) -> bool:
        if scope["method"] not in _UNSAFE_METHODS:
            return True
        scheme = scope.get("scheme", "http")
        if (_header(scope, b"sec-fetch-site") or "").lower() == "cross-site":
            return False
        origin = _header(scope, b"origin")
        if origin is not None:
            # "null" comes from sandboxed frames, data: URLs and privacy redirects: never our page.
            return origin != "null" and self._origin_matches(origin, scheme, host_header)
        referer = _header(scope, b"referer")
        if referer:
            return self._origin_matches(referer, scheme, host_header)
        return True

    def _presented_token(self, scope) -> str | None:
        auth = _header(scope, b"authorization")
        if auth and auth[:7].lower() == "bearer ":
            return auth[7:].strip()
        cookie_header = _header(scope, b"cookie")
        if cookie_header:
            jar = SimpleCookie()
            try:
                jar.load(cookie_header)
            except Exception:  # noqa: BLE001 - a malformed cookie header counts as no token
                return None
            name = token_cookie_name(self.port)
            if name in jar:
                return jar[name].value
        return None

    def _token_ok(self, presented: str | None) -> bool:
        if self.token is None:
            return True
        return presented is not None and secrets.compare_digest(presented.encode(), self.token.encode())

    # ASGI -----------------------------------------------------------------------

    async def __call__(self, scope, receive, send):
        if scope["type"] not in ("http", "websocket"):
            await self.app(scope, receive, send)
            return
        is_api = scope.get("path", "").startswith("/api/")
        host_header = _header(scope, b"host") or ""
        if not self._host_ok(scope, _split_host(host_header)):
            await refuse_request(send, 421, "this server answers only to its own address (Host header "
                                     f"{host_header[:80]!r} is not one of them)", is_api)
            return
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        if not self._origin_ok(scope, host_header):
            await refuse_request(send, 403, "cross-site request refused: the page that sent it is not served "
                                     "by this pairlens server", is_api)
            return
        if self.token is not None:
            query = dict(parse_qsl(scope.get("query_string", b"").decode("latin-1"), keep_blank_values=True))
            from_query = query.get("token")
            if from_query is not None and scope["method"] in ("GET", "HEAD") and self._token_ok(from_query):
                await _exchange_token(send, scope, query, self.token, token_cookie_name(self.port))
                return
            if not self._token_ok(self._presented_token(scope)):
                await refuse_request(send, 401, "this server needs its access token: open the link that "
                                         "'pairlens serve' printed, or send 'Authorization: Bearer <token>'",
                              is_api, extra=[(b"www-authenticate", b'Bearer realm="pairlens"')])
                return
        await self.app(scope, self._limited(scope, receive), _with_headers(send))

    def _limited(self, scope, receive):
        if scope.get("path") in self.upload_paths or scope["method"] in ("GET", "HEAD", "OPTIONS"):
            return receive
        limit = self.max_body_bytes
        received = 0

        async def limited_receive():
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise _body_too_large(limit)
            return message

        declared = _header(scope, b"content-length")
        if declared and declared.isdigit() and int(declared) > limit:
            async def refuse_receive():
                raise _body_too_large(limit)
            return refuse_receive
        return limited_receive


def _body_too_large(limit: int):
    # Starlette's HTTPException passes FastAPI's body parsing unchanged and keeps its detail.
    from starlette.exceptions import HTTPException

    return HTTPException(status_code=413, detail=f"the request body is larger than {limit // 1024} KB; "
                                                 "settings and forms are small, files go to the upload")


def _with_headers(send):
    async def wrapped(message):
        if message["type"] == "http.response.start":
            headers = list(message.get("headers", []))
            present = {k.lower() for k, _ in headers}
            headers.extend((k, v) for k, v in _SECURITY_HEADERS if k not in present)
            message = dict(message, headers=headers)
        await send(message)
    return wrapped


async def refuse_request(send, status: int, detail: str, is_api: bool, extra=None) -> None:
    if is_api:
        body = json.dumps({"detail": detail}).encode()
        ctype = b"application/json"
    else:
        from html import escape

        body = (f"<!doctype html><meta charset=utf-8><title>pairlens: {status}</title>"
                f"<p>{escape(detail)}</p>").encode()
        ctype = b"text/html; charset=utf-8"
    headers = [(b"content-type", ctype), (b"content-length", str(len(body)).encode())]
    headers += list(extra or ()) + _SECURITY_HEADERS
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": body})


def local_location(path: str) -> str:
    """A redirect target that can only be a path on this server.

    Browsers read ``\\`` as ``/`` and drop tabs and line breaks from a Location, so
    ``/\\evil.example/`` or ``/<tab>/evil.example`` would leave the site like ``//evil.example``.
    Every character outside the unreserved and path-safe ASCII set (backslash, control
    characters, spaces, non-ASCII) is percent-encoded, and leading slashes collapse to one.
    """
    from urllib.parse import quote

    encoded = quote(str(path), safe="/:@!$&'()*+,;=-._~%")
    return "/" + encoded.lstrip("/")


async def _exchange_token(send, scope, query: dict, token: str, cookie_name: str) -> None:
    """``?token=`` -> cookie + redirect to the same address without the token."""
    rest = {k: v for k, v in query.items() if k != "token"}
    location = local_location(scope.get("path", "/")) + (("?" + urlencode(rest)) if rest else "")
    cookie = (f"{cookie_name}={token}; Path=/; HttpOnly; SameSite=Strict").encode()
    headers = [(b"location", location.encode("latin-1", "replace")), (b"set-cookie", cookie),
               (b"cache-control", b"no-store"), (b"content-length", b"0")] + _SECURITY_HEADERS
    await send({"type": "http.response.start", "status": 303, "headers": headers})
    await send({"type": "http.response.body", "body": b""})


def display_name(filename: str | None, fallback: str = "upload") -> str:
    """A client's file name reduced to something safe to show: last path part, no control characters.

    Only ever displayed (bytes are stored under their hash); Windows browsers
    and some tools send full paths with backslashes.
    """
    name = (filename or "").replace("\\", "/").rsplit("/", 1)[-1]
    name = "".join(ch for ch in name if ch.isprintable()).strip()
    if name in ("", ".", ".."):
        return fallback
    return name[:200]
