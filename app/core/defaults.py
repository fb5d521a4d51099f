"""The engine's defaults that the command line names in its options, kept apart from the engine
so that ``lagdesk COMMAND --help`` shows them without loading numba, statsmodels or scipy."""

from __future__ import annotations

# ``period``: read the seasonal period from the sampling frequency (app.core.seasonality).
AUTO_PERIOD = "auto"
# Forecast origins of a rolling-origin check (app.core.backtest): five spaced origins, common
# practice in the rolling-origin evaluations that Tashman (2000) reviews.
DEFAULT_ORIGINS = 5
