"""Imported by the worker pool's forkserver before it forks any worker: the engine's modules and
its compiled likelihood are loaded once there (numba loads compiled code on first call), so a
worker starts ready instead of spending its first second loading them."""

from app.core.likelihood import warm_up
from app.jobs import work  # noqa: F401  (loaded for the workers, not used here)

warm_up()
