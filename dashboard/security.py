"""Access control for the dashboard when it is reachable from other machines.

Bound to a loopback address (the default, ``127.0.0.1``) the dashboard needs
no token: only programs on this computer can reach it. Bound to anything else
it must be given a token (or generates one with :mod:`secrets`), and *every*
HTTP request -- pages, assets, and the ``/_dash-update-component`` callback
requests -- must carry it, in one of three ways:

* ``?token=...`` in the address, once: the answer sets an HttpOnly cookie so
  that the page's own follow-up requests (scripts, callbacks) carry it;
* the cookie ``drawdown_token``;
* an ``Authorization: Bearer ...`` header (scripts, curl).

A request without a token is refused with 401, one with a wrong token with 403.
Tokens are compared with :func:`secrets.compare_digest` (constant time).

On loopback without a token, the address alone is no protection against DNS
rebinding: a page on another site can make its own name resolve to 127.0.0.1
and then talk to the dashboard as "its" server. So :func:`install_host_guard`
admits only requests whose ``Host`` header names this computer (``localhost``,
``*.localhost``, a 127.x.y.z or ``[::1]`` address) or the address the server
was told to bind (``--host``), and refuses every state-changing request
(anything but GET, HEAD, OPTIONS) whose ``Origin`` is not the dashboard's own.
"""

from __future__ import annotations

import ipaddress
import secrets
from typing import Any
from urllib.parse import urlsplit

import flask

COOKIE = "drawdown_token"
QUERY = "token"
#: How long the browser keeps the token cookie [s] (a week).
COOKIE_MAX_AGE_S = 7 * 24 * 3600


def is_loopback(host: str) -> bool:
    """True when ``host`` names this computer only (127.0.0.0/8, ::1, localhost)."""
    if host.strip().lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False  # a host name other than localhost may resolve anywhere


#: Addresses that mean "every interface": they are never a Host a browser sends.
_WILDCARDS = {"", "0.0.0.0", "::", "[::]"}
#: Methods that only read; every other method may change state and must come from our own page.
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


def _host_name(host_header: str) -> str:
    """The name in a ``Host`` header, without its port, brackets or trailing dot, lower case."""
    h = host_header.strip().lower()
    if h.startswith("["):  # [::1]:8050
        return h[1:h.find("]")] if "]" in h else h
    if h.count(":") == 1:
        h = h.split(":", 1)[0]
    return h.rstrip(".")


def is_local_name(name: str) -> bool:
    """True for a name that always means this computer: localhost, *.localhost, a loopback address.

    ``*.localhost`` is reserved for loopback (RFC 6761) and browsers resolve it there
    themselves, so no outside DNS answer can point it elsewhere.
    """
    n = _host_name(name)
    return n == "localhost" or n.endswith(".localhost") or is_loopback(n)


def allowed_host(host_header: str, bound_host: str) -> bool:
    """True when a request's ``Host`` header names this computer or the configured ``--host``."""
    name = _host_name(host_header)
    if not name:
        return False
    if is_local_name(name):
        return True
    bound = _host_name(bound_host) if bound_host.strip().lower() not in _WILDCARDS else ""
    return bool(bound) and name == bound


def _origin_netloc(origin: str) -> str | None:
    parts = urlsplit(origin)
    if parts.scheme not in ("http", "https") or not parts.hostname:
        return None
    host = parts.hostname if ":" not in parts.hostname else f"[{parts.hostname}]"
    default = 443 if parts.scheme == "https" else 80
    port = parts.port or default
    return f"{host}:{port}"


def same_origin(origin: str, host_header: str, *, scheme: str = "http") -> bool:
    """True when ``Origin`` names the same host and port as the request's ``Host`` header."""
    if not origin or origin.strip().lower() == "null":
        return False
    mine = _origin_netloc(f"{scheme}://{host_header.strip()}")
    theirs = _origin_netloc(origin.strip())
    return mine is not None and theirs is not None and mine.lower() == theirs.lower()


def install_host_guard(server: flask.Flask, *, bound_host: str, check_host: bool = True) -> None:
    """Refuse requests for another site's name, and state changes from another site's page.

    Parameters
    ----------
    server
        The Flask server under the Dash app (``app.server``).
    bound_host
        The address the server binds (``--host``); a request may name it in ``Host``.
    check_host
        Check the ``Host`` header (on loopback without a token: the DNS-rebinding case).
        Off loopback the token does that job, and the machine may be reached by any of its
        names, so only ``Origin`` is checked there.
    """

    def _guard() -> flask.Response | None:
        req = flask.request
        host = req.headers.get("Host", "")
        if check_host and not allowed_host(host, bound_host):
            shown = host[:100].encode("ascii", "replace").decode()
            return flask.Response(
                f"403 Forbidden: this dashboard answers only to this computer's own address, not to "
                f"Host {shown!r}. Open http://127.0.0.1:<port>/ (or start it with --host NAME).\n",
                status=403, mimetype="text/plain")
        if req.method not in SAFE_METHODS:
            origin = req.headers.get("Origin")
            cross = req.headers.get("Sec-Fetch-Site", "").lower() == "cross-site"
            if cross or (origin is not None and not same_origin(origin, host, scheme=req.scheme)):
                return flask.Response("403 Forbidden: a change sent from another site's page is refused; "
                                      "use the dashboard's own page.\n", status=403, mimetype="text/plain")
        return None

    # First of all request hooks: before the token check and before Dash's own set-up.
    server.before_request_funcs.setdefault(None, []).insert(0, _guard)


def new_token() -> str:
    """A fresh random access token (32 bytes of entropy, URL-safe text)."""
    return secrets.token_urlsafe(32)


def _presented_token(request: flask.Request) -> str | None:
    auth = request.headers.get("Authorization", "")
    if auth[:7].lower() == "bearer ":
        return auth[7:].strip()
    if QUERY in request.args:
        return request.args.get(QUERY, "")
    return request.cookies.get(COOKIE)


def install_token_guard(server: flask.Flask, token: str) -> None:
    """Refuse every request to ``server`` that does not carry ``token``.

    Parameters
    ----------
    server
        The Flask server under the Dash app (``app.server``).
    token
        The access token; must be at least 16 characters.

    Raises
    ------
    ValueError
        When the token is too short to be safe.
    """
    if not token or len(token) < 16:
        raise ValueError("the dashboard token must be at least 16 characters (omit --token to generate one)")
    expected = token.encode("utf-8")

    def _guard() -> flask.Response | None:
        presented = _presented_token(flask.request)
        if presented is None:
            return flask.Response("401 Unauthorized: this dashboard needs its access token "
                                  "(open the address printed at start, with ?token=...).\n",
                                  status=401, mimetype="text/plain",
                                  headers={"WWW-Authenticate": 'Bearer realm="drawdown"'})
        if not secrets.compare_digest(presented.encode("utf-8"), expected):
            return flask.Response("403 Forbidden: wrong access token.\n", status=403, mimetype="text/plain")
        flask.g.drawdown_token_from_query = QUERY in flask.request.args
        return None

    def _remember(response: flask.Response) -> flask.Response:
        if getattr(flask.g, "drawdown_token_from_query", False):
            response.set_cookie(COOKIE, token, max_age=COOKIE_MAX_AGE_S, httponly=True, samesite="Strict",
                                secure=flask.request.is_secure)
        return response

    # Registered first so that it runs before Dash's own first-request set-up.
    server.before_request_funcs.setdefault(None, []).insert(0, _guard)
    server.after_request(_remember)


# -- response headers -------------------------------------------------------------------------

#: Where the dashboard's pages may load things from: only the dashboard itself (``serve_locally``:
#: no CDN). Dash renders with React and Plotly: scripts come from the server's own component
#: suites plus the one inline start-up script, admitted by its hash (see ``Dash.csp_hashes``);
#: Plotly and React set inline ``style`` attributes, so styles need 'unsafe-inline'; Plotly draws
#: images and fonts from ``data:``/``blob:`` URLs. No page may be framed by another site's page.
CSP_BASE = {
    "default-src": ["'self'"],
    "script-src": ["'self'"],
    "style-src": ["'self'", "'unsafe-inline'"],
    "img-src": ["'self'", "data:", "blob:"],
    "font-src": ["'self'", "data:"],
    "connect-src": ["'self'"],
    "worker-src": ["'self'", "blob:"],
    "object-src": ["'none'"],
    "base-uri": ["'self'"],
    "form-action": ["'self'"],
    "frame-ancestors": ["'none'"],
}


def content_security_policy(script_hashes: list[str] | tuple[str, ...] = ()) -> str:
    """The Content-Security-Policy header value, the inline scripts' hashes admitted."""
    parts = []
    for directive, sources in CSP_BASE.items():
        if directive == "script-src":
            sources = [*sources, *script_hashes]
        parts.append(f"{directive} {' '.join(sources)}")
    return "; ".join(parts)


#: Paths of static files (fingerprinted by Dash); they carry no data and may be cached.
_STATIC_PREFIXES = ("/_dash-component-suites/", "/assets/", "/_favicon.ico")


def install_security_headers(server: flask.Flask, *, script_hashes: Any = (),
                             token_required: bool = False) -> None:
    """Send the security headers on every response.

    ``script_hashes`` is a list of CSP source hashes of the inline scripts, or a callable giving
    it (Dash adds inline scripts -- the pages' clientside callbacks -- only when it sets itself
    up on the first request, so ``app.csp_hashes`` is asked on each response).

    * ``Content-Security-Policy`` (:func:`content_security_policy`), ``frame-ancestors 'none'``
      and ``X-Frame-Options: DENY`` (older browsers): no other site may frame the dashboard;
    * ``X-Content-Type-Options: nosniff``: a file is only ever what its type says;
    * ``Referrer-Policy: no-referrer``: an address with ``?token=`` is never passed on;
    * ``Cache-Control: no-store`` on every response that bears the token or the data behind it
      when a token is required (all but the static script and style files, and those too when
      their address carries ``?token=``), and on every response that sets the token cookie.
    """
    fixed = None if callable(script_hashes) else content_security_policy(script_hashes)

    def _headers(response: flask.Response) -> flask.Response:
        h = response.headers
        h["Content-Security-Policy"] = fixed or content_security_policy(script_hashes())
        h["X-Content-Type-Options"] = "nosniff"
        h["Referrer-Policy"] = "no-referrer"
        h["X-Frame-Options"] = "DENY"
        req = flask.request
        bears_token = QUERY in req.args or any(c.startswith(f"{COOKIE}=") for c in h.getlist("Set-Cookie"))
        static = req.path.startswith(_STATIC_PREFIXES)
        if bears_token or (token_required and not static):
            h["Cache-Control"] = "no-store"
            h.pop("Expires", None)
            h.pop("ETag", None)
            h.pop("Last-Modified", None)
        return response

    server.after_request(_headers)


def quiet_request_handler() -> type:
    """A werkzeug request handler that sends no ``Server`` header (no name or version banner)."""
    from werkzeug.serving import WSGIRequestHandler

    class QuietRequestHandler(WSGIRequestHandler):
        def send_header(self, keyword: str, value: str) -> None:
            if keyword.lower() == "server":
                return
            super().send_header(keyword, value)

    return QuietRequestHandler


# -- upload size -------------------------------------------------------------------------------

#: Largest log file the System setup page accepts [bytes]: 50 MB, i.e. 50,000,000 bytes (decimal
#: megabytes, as the README, the page and every refusal say it).
MAX_UPLOAD_BYTES = 50_000_000
#: The limit as every text says it.
UPLOAD_LIMIT_TEXT = f"{MAX_UPLOAD_BYTES / 1e6:g} MB"
#: A callback request carries the upload base64-encoded (4/3 of the file) plus JSON framing.
MAX_CALLBACK_BODY = MAX_UPLOAD_BYTES * 4 // 3 + (1 << 20)
#: Most bytes of an over-long body read (and dropped) so that the browser receives the refusal
#: rather than a reset connection; beyond this the connection is simply closed.
_DRAIN_MAX = 4 * MAX_CALLBACK_BODY


def upload_refusal(name: str, size_bytes: float, *, approximate: bool = False) -> str:
    """The one sentence that refuses an upload over the limit."""
    size = f"{'about ' if approximate else ''}{size_bytes / 1e6:.1f} MB"
    return (f"{name} is {size}, over the {UPLOAD_LIMIT_TEXT} upload limit; nothing was stored. "
            "Import a bigger log with `drawdown import` on the computer that runs the dashboard.")


def install_body_limit(server: flask.Flask, *, callback_too_large: Any = None) -> None:
    """Refuse a request body over :data:`MAX_CALLBACK_BODY` in the dashboard's own words.

    ``callback_too_large(message)`` returns the JSON body of a Dash callback answer that shows
    ``message`` on the page (the upload's result box); without it, or for any other address,
    the refusal is a short plain-text 413.
    """
    from werkzeug.exceptions import RequestEntityTooLarge

    server.config["MAX_CONTENT_LENGTH"] = MAX_CALLBACK_BODY

    def _too_large(_exc: Exception) -> flask.Response:
        req = flask.request
        length = req.content_length or 0
        stream = req.environ.get("wsgi.input")
        if stream is not None and 0 < length <= _DRAIN_MAX:
            left = length
            while left > 0:
                got = stream.read(min(left, 1 << 20))
                if not got:
                    break
                left -= len(got)
        approx_file = max(length - 2048, 0) * 3 / 4  # base64 payload back to file bytes
        message = upload_refusal("The file", approx_file, approximate=True)
        if callback_too_large is not None and req.path.endswith("/_dash-update-component"):
            return flask.Response(callback_too_large(message), status=200, mimetype="application/json")
        return flask.Response(f"413 {message}\n", status=413, mimetype="text/plain")

    server.register_error_handler(RequestEntityTooLarge, _too_large)


# -- paths never shown on a page ---------------------------------------------------------------

def scrub_paths(text: str, paths: dict[str, str]) -> str:
    """``text`` with each server path in ``paths`` replaced by what the page may show instead.

    Longer paths are replaced first, so a file inside a replaced folder goes as a whole.
    """
    for p in sorted((p for p in paths if p), key=len, reverse=True):
        text = text.replace(p, paths[p])
    return text
