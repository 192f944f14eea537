"""Access code and CSRF tokens.

- Listening beyond localhost, every request needs the access code: given once in the
  address (``?code=...``, as in the QR code printed on the PC), it is kept in a cookie
  (HttpOnly, SameSite=Strict) for the rest of the visit.
- Every form carries a CSRF token that must equal the visit's token cookie (the
  double-submit pattern; the cookie is SameSite=Strict and another site cannot read it).
"""

from __future__ import annotations

import hmac
import secrets
from collections.abc import Awaitable, Callable
from typing import Any
from urllib.parse import urlencode

from starlette.requests import Request
from starlette.responses import PlainTextResponse, RedirectResponse, Response

__all__ = [
    "ACCESS_COOKIE",
    "CSRF_COOKIE",
    "AccessCode",
    "csrf_ok",
    "csrf_token",
    "new_access_code",
]

ACCESS_COOKIE = "printcheck_access"
CSRF_COOKIE = "printcheck_csrf"

# No letters that a fitter could mistake for one another on a screen (0/O, 1/l/I).
_ALPHABET = "23456789abcdefghjkmnpqrstuvwxyz"


def new_access_code(length: int = 10) -> str:
    """A random access code (about 50 bits)."""
    return "".join(secrets.choice(_ALPHABET) for _ in range(length))


def _same(a: str | None, b: str) -> bool:
    return a is not None and hmac.compare_digest(a.encode(), b.encode())


class AccessCode:
    """ASGI middleware: refuse every request without the access code (when one is set)."""

    def __init__(self, app: Any, code: str | None) -> None:
        self.app = app
        self.code = code

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http" or self.code is None:
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        given = request.query_params.get("code")
        if _same(request.cookies.get(ACCESS_COOKIE), self.code) and given is None:
            await self.app(scope, receive, send)
            return
        response: Response
        if _same(given, self.code):
            # the code in the address: keep it in a cookie, and take it out of the address
            rest = [(k, v) for k, v in request.query_params.multi_items() if k != "code"]
            target = request.url.path + (("?" + urlencode(rest)) if rest else "")
            response = RedirectResponse(target, status_code=303)
            response.set_cookie(
                ACCESS_COOKIE, self.code, httponly=True, samesite="strict", max_age=12 * 3600
            )
        else:
            response = PlainTextResponse(
                "printcheck: this page needs the access code. Scan the QR code shown on the "
                "PC running 'printcheck serve', or open the address printed there.",
                status_code=403,
            )
        await response(scope, receive, send)


def csrf_token(request: Request) -> str:
    """The visit's CSRF token (made on the first page; set as a cookie by the page)."""
    token = request.cookies.get(CSRF_COOKIE)
    if token and len(token) == 43:
        return token
    state = getattr(request.state, "csrf", None)
    if state is None:
        state = secrets.token_urlsafe(32)
        request.state.csrf = state
    return str(state)


def keep_csrf(request: Request, response: Response) -> Response:
    """Set the CSRF cookie on ``response`` when this visit made a new token."""
    made = getattr(request.state, "csrf", None)
    if made is not None:
        response.set_cookie(CSRF_COOKIE, made, httponly=True, samesite="strict")
    return response


def csrf_ok(request: Request, sent: Any) -> bool:
    """True when the form's token ``sent`` is the visit's token."""
    cookie = request.cookies.get(CSRF_COOKIE)
    return isinstance(sent, str) and cookie is not None and _same(sent, cookie)


Handler = Callable[[Request], Awaitable[Response]]
