"""The login page of a server started with an access token (see :mod:`app.web.security`)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import RedirectResponse, Response

from app.web.security import LOGIN_PATH, TOKEN_COOKIE, check_csrf, safe_next, tokens_match
from app.web.templating import templates

router = APIRouter(dependencies=[Depends(check_csrf)], include_in_schema=False)
WRONG_TOKEN = "That is not this server's access token."


def _login_page(request: Request, target: str, error: str | None, status_code: int = 200) -> Response:
    context = {"next": target, "error": error, "protected": request.app.state.settings.access_token is not None}
    return templates.TemplateResponse(request=request, name="login.html", context=context, status_code=status_code)


@router.get(LOGIN_PATH, name="login")
def login_form(request: Request, next: str = "/") -> Response:
    return _login_page(request, safe_next(next), None)


@router.post(LOGIN_PATH, name="login_save")
def login_save(request: Request, token: Annotated[str, Form()] = "", next: Annotated[str, Form()] = "/") -> Response:
    """Check the token and keep it in a cookie this browser sends with every request."""
    expected = request.app.state.settings.access_token
    target = safe_next(next)
    if expected is None:
        return RedirectResponse(target, status_code=303)
    if not tokens_match(token.strip(), expected):
        return _login_page(request, target, WRONG_TOKEN, status_code=401)
    response = RedirectResponse(target, status_code=303)
    response.set_cookie(TOKEN_COOKIE, expected, httponly=True, samesite="strict")
    return response
