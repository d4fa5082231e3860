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
"""

from __future__ import annotations

import ipaddress
import secrets

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
