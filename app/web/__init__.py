"""The review dashboard: server-rendered pages and a JSON API over the portfolio database."""
