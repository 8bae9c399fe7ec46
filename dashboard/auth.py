"""Access control on the dashboard's Flask server: an access token or HTTP basic auth.

With neither configured nothing is checked (the app then only listens on loopback; `serve` refuses
anything else). With a token, a request is let in when it carries

- ``Authorization: Bearer <token>``, or
- the session cookie set after a visit to any page with ``?token=<token>`` (the browser is then
  redirected to the same page without the token in its address).

With a username and password, ``Authorization: Basic`` must match (the browser asks once).
Both may be configured; either then suffices. Secrets are compared in constant time, and the
cookie holds an HMAC of the token, never the token. Every response carries headers that stop
other sites from framing the app or sniffing content types.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import urllib.parse
from typing import Any

__all__ = ["COOKIE", "install", "is_loopback"]

COOKIE = "shockflow_access"


def is_loopback(host: str) -> bool:
    """True only for ``localhost`` and literal loopback addresses (127.0.0.0/8, ::1)."""
    text = host.strip().strip("[]").lower()
    if text == "localhost":
        return True
    try:
        return ipaddress.ip_address(text).is_loopback
    except ValueError:
        return False


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

    @server.before_request
    def _check() -> Any:
        if authorised():
            return None
        given = request.args.get("token")
        if token is not None and given is not None and _same(given, token):
            query = [(k, v) for k, v in request.args.items(multi=True) if k != "token"]
            target = request.path + ("?" + urllib.parse.urlencode(query) if query else "")
            response = redirect(target, code=303)
            response.set_cookie(
                COOKIE, expected_cookie or "", httponly=True, samesite="Strict",
                secure=request.is_secure, path="/",
            )  # fmt: skip
            return response
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
