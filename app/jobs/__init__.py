"""Running the engine over a portfolio: process pools, progress, resumable analysis runs."""
