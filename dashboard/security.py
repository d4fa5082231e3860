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
