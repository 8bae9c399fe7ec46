"""Access control on the dashboard's Flask server: an access token or HTTP basic auth.

With neither configured nothing is checked (the app then only listens on loopback; `serve` refuses
anything else). With a token, a request is let in when it carries

- ``Authorization: Bearer <token>``, or
- the session cookie set after a visit to any page with ``?token=<token>``. The browser is then
  redirected to the same page without the token in its address — also when it was signed in
  already, so the token never stays in the address bar, history or a shared link. The cookie is
  ``HttpOnly``, ``SameSite=Strict``, and ``Secure`` when the request came over TLS (directly, or
  through a reverse proxy listed in ``[dashboard] trusted_proxies`` that says so with
  ``X-Forwarded-Proto: https``; `serve` tells gunicorn which proxies to believe).

With a username and password, ``Authorization: Basic`` must match (the browser asks once).
Both may be configured; either then suffices. Secrets are compared in constant time, and the
cookie holds an HMAC of the token, never the token. Every response carries headers that stop
other sites from framing the app or sniffing content types.
"""

from __future__ import annotations

import hashlib
import hmac
import urllib.parse
from typing import Any

__all__ = ["COOKIE", "MIN_TOKEN_LENGTH", "install"]

COOKIE = "shockflow_access"
#: Fewest characters of a token that guards a non-loopback address (`dashboard.app.check_bind`).
MIN_TOKEN_LENGTH = 16


def _cookie_value(token: str) -> str:
    return hmac.new(token.encode(), b"shockflow dashboard session", hashlib.sha256).hexdigest()


def _same(a: str | None, b: str | None) -> bool:
    if a is None or b is None:
        return False
    return hmac.compare_digest(a.encode("utf-8", "surrogatepass"), b.encode("utf-8", "surrogatepass"))


def install(
    server: Any,
    *,
    token: str | None = None,
    username: str | None = None,
    password: str | None = None,
) -> None:
    """Protect every route of the Flask `server` (pages, callbacks, assets, report downloads)."""
    from flask import Response, redirect, request

    @server.after_request
    def _headers(response: Any) -> Any:
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("X-Frame-Options", "DENY")
        response.headers.setdefault("Referrer-Policy", "no-referrer")
        return response

    if token is None and username is None:
        return
    expected_cookie = None if token is None else _cookie_value(token)

    def authorised() -> bool:
        if token is not None:
            header = request.headers.get("Authorization", "")
            if header[:7].lower() == "bearer " and _same(header[7:].strip(), token):
                return True
            if _same(request.cookies.get(COOKIE), expected_cookie):
                return True
        if username is not None:
            auth = request.authorization
            if auth is not None and auth.type == "basic":
                return _same(auth.username, username) & _same(auth.password, password)
        return False

    def without_token() -> str:
        query = [(k, v) for k, v in request.args.items(multi=True) if k != "token"]
        return request.path + ("?" + urllib.parse.urlencode(query) if query else "")

    @server.before_request
    def _check() -> Any:
        given = request.args.get("token")
        if token is not None and given is not None and _same(given, token):
            response = redirect(without_token(), code=303)
            response.set_cookie(
                COOKIE, expected_cookie or "", httponly=True, samesite="Strict",
                secure=request.is_secure, path="/",
            )  # fmt: skip
            return response
        if authorised():
            if "token" in request.args and request.method in ("GET", "HEAD"):
                return redirect(without_token(), code=303)  # the token leaves the address bar
            return None
        if username is not None:
            return Response(
                "Sign in to the shockflow dashboard.\n", status=401,
                headers={"WWW-Authenticate": 'Basic realm="shockflow dashboard", charset="UTF-8"'},
                mimetype="text/plain",
            )  # fmt: skip
        return Response(
            "This shockflow dashboard needs its access token: open the address with ?token=<token> "
            "once, or send 'Authorization: Bearer <token>'.\n",
            status=401, mimetype="text/plain",
        )  # fmt: skip
