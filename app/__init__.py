"""Lagdesk: Box-Jenkins identification and review of ARIMA orders for a portfolio of series."""

__version__ = "0.1.0"
