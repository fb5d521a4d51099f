"""How the web tests' clients reach the app: the test client's host name allowed by the
settings (as a reverse proxy's name would be), and the CSRF token a browser's page sends."""

from __future__ import annotations

from fastapi.testclient import TestClient

from app.web.security import CSRF_COOKIE, CSRF_HEADER

# The Host header of FastAPI's test client.
TEST_HOSTS = ("testserver",)


def with_csrf(test_client: TestClient) -> TestClient:
    """A client that sends this browser's CSRF token with every request, as the pages' forms do
    (one page visit sets the cookie; app.web.security checks it on every state-changing request)."""
    test_client.get("/login")
    test_client.headers[CSRF_HEADER] = test_client.cookies[CSRF_COOKIE]
    return test_client
