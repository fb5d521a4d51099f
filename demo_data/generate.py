"""Generate Lagdesk's invented demo portfolio and the truth behind it.

Usage::

    python demo_data/generate.py [OUTPUT_DIR]

writes ``portfolio.csv`` (long layout: ``series_id,timestamp,value``) and ``truth.csv`` (one
row per series: the process it was simulated from) into ``OUTPUT_DIR``, by default the folder
this file sits in. The output is the same byte for byte on every run: each series draws its
innovations from ``numpy.random.default_rng([SEED, crc32(series_id)])``, so a series does not
change when others are added or reordered.

Every company, shop, room and product name here is invented.

Each series is ``value = level + deterministic part + X_t`` (then ``exp`` of that when the
transform is ``log``), where ``X_t`` is a seasonal ARIMA process written in statsmodels' sign
convention,

    phi(L) Phi(L^s) (1 - L)^d (1 - L^s)^D X_t = c + theta(L) Theta(L^s) Z_t,

    phi(L) = 1 - phi_1 L - ...,   theta(L) = 1 + theta_1 L + ...,   Z_t ~ N(0, scale^2),

and ``c`` is the drift. The deterministic part is a fixed calendar profile (hour of day, day of
week or month of year), used only for seasonally differenced series: the seasonal difference
removes it exactly, so it changes the look of the series but not its model. Stationary series
are simulated with a long burn-in, so they start in their stationary distribution; integrated
ones start at rest.

References
----------
.. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley, ch. 3-4 (ARMA and ARIMA processes) and ch. 9
   (multiplicative seasonal models).
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import os
import tempfile
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from statsmodels.tsa.arima_process import ArmaProcess

SEED = 20240611
BURN_IN = 1000  # steps discarded so a stationary series forgets its zero start (|root|^-1000 ~ 0)
END = {"hourly": "2024-12-31 23:00", "daily": "2024-12-31", "monthly": "2024-12-01"}
PANDAS_FREQ = {"hourly": "h", "daily": "D", "monthly": "MS"}
PERIOD = {"hourly": 24, "daily": 7, "monthly": 12}
TIME_FORMAT = {"hourly": "%Y-%m-%dT%H:%M", "daily": "%Y-%m-%d", "monthly": "%Y-%m-%d"}

# Calendar profiles for seasonally differenced series, one value per phase of the season.
WEEKLY_PROFILE = np.array([-0.2, -0.3, -0.2, 0.0, 0.4, 1.0, -0.7])  # Mon..Sun: Saturday peak, quiet Sunday
MONTHLY_PROFILE = np.array([-0.5, -0.4, -0.1, 0.1, 0.0, -0.1, -0.3, -0.3, 0.0, 0.1, 0.3, 1.0])  # Jan..Dec
HOURLY_PROFILE = np.cos(2 * np.pi * (np.arange(24) - 15) / 24)  # warmest / busiest at 15:00

# Sizes of the deliberate defects, in innovation standard deviations (``scale``).
LEVEL_SHIFT_SIZE = 5.0
OUTLIER_SIZE = 8.0
GAP_RUN = 6  # timestamps dropped from the file in a row
AWKWARDNESS = ("", "gap", "level_shift", "outlier", "very_short", "constant")

TRUTH_COLUMNS = [
    "series_id", "group", "frequency", "n", "process", "order_p", "order_d", "order_q",
    "seasonal_P", "seasonal_D", "seasonal_Q", "period", "transform", "coefficients",
    "awkwardness", "description",
]


@dataclass(frozen=True)
class Spec:
    """One demo series: where it belongs, its process, its level and scale, its defect.

    ``level``, ``scale``, ``drift`` and ``season_amplitude`` are in data units, or in log
    units when ``transform == "log"``. ``scale == 0`` makes a constant series.
    """

    series_id: str
    group: str
    frequency: str
    n: int
    level: float
    scale: float
    ar: tuple[float, ...] = ()
    ma: tuple[float, ...] = ()
    d: int = 0
    seasonal_ar: tuple[float, ...] = ()
    seasonal_ma: tuple[float, ...] = ()
    seasonal_d: int = 0
    drift: float = 0.0
    season_amplitude: float = 0.0
    transform: str = "none"
    decimals: int = 3
    awkwardness: str = ""
    description: str = ""

    def __post_init__(self) -> None:
        if self.frequency not in PERIOD:
            raise ValueError(f"{self.series_id}: frequency {self.frequency!r} is not one of {', '.join(PERIOD)}")
        if self.transform not in ("none", "log"):
            raise ValueError(f"{self.series_id}: transform must be 'none' or 'log', not {self.transform!r}")
        if self.awkwardness not in AWKWARDNESS:
            raise ValueError(f"{self.series_id}: unknown awkwardness {self.awkwardness!r}")
        if self.season_amplitude and not self.seasonal_d:
            raise ValueError(f"{self.series_id}: a calendar profile needs seasonal differencing to leave the model unchanged")
        if self.drift and not (self.d or self.seasonal_d):
            raise ValueError(f"{self.series_id}: drift needs differencing (a stationary series has a level, not a drift)")
        process = self.arma_process()
        if not (process.isstationary and process.isinvertible):
            raise ValueError(f"{self.series_id}: the ARMA part must be stationary and invertible")

    @property
    def period(self) -> int | None:
        seasonal = self.seasonal_ar or self.seasonal_ma or self.seasonal_d
        return PERIOD[self.frequency] if seasonal else None

    @property
    def process_name(self) -> str:
        p, q = len(self.ar), len(self.ma)
        if self.scale == 0:
            return "constant"
        if self.period is None:
            return "white noise" if p == q == self.d == 0 else f"ARIMA({p},{self.d},{q})"
        big_p, big_q = len(self.seasonal_ar), len(self.seasonal_ma)
        return f"SARIMA({p},{self.d},{q})({big_p},{self.seasonal_d},{big_q}){self.period}"

    def arma_process(self) -> ArmaProcess:
        """The stationary ARMA part with both lag polynomials multiplied out."""
        s = PERIOD[self.frequency]
        ar = np.convolve(np.r_[1.0, -np.asarray(self.ar)], _seasonal_polynomial(-np.asarray(self.seasonal_ar), s))
        ma = np.convolve(np.r_[1.0, np.asarray(self.ma)], _seasonal_polynomial(np.asarray(self.seasonal_ma), s))
        return ArmaProcess(ar, ma)


def _seasonal_polynomial(coefficients: np.ndarray, s: int) -> np.ndarray:
    poly = np.zeros(s * len(coefficients) + 1)
    poly[0] = 1.0
    poly[s::s] = coefficients
    return poly


ROOMS, HUMIDITY, ENERGY, DOORS = "polarquay-rooms", "polarquay-humidity", "polarquay-energy", "polarquay-doors"
DEFROST, HOURLY, FORKLIFTS = "polarquay-defrost", "polarquay-hourly", "polarquay-forklifts"
DAILY_SALES, MONTHLY = "hearthloaf-daily-sales", "hearthloaf-monthly"
SHOP_NAMES = {"riverside": "Riverside", "millgate": "Millgate", "old-tannery": "Old Tannery", "station-row": "Station Row"}


def sales(shop: str, product: str, n: int, level: float, scale: float, note: str = "", **process) -> Spec:
    """A daily product-by-shop sales series of Hearthloaf Bakeries (whole items)."""
    text = f"{product.replace('-', ' ').capitalize()} sold per day at the {SHOP_NAMES[shop]} shop (items)."
    return Spec(f"hearthloaf/{shop}/{product}", DAILY_SALES, "daily", n, level, scale, decimals=0,
                description=" ".join(filter(None, [text, note])), **process)


COLD_STORE = [
    Spec("polarquay/freezer-1/temp-c", ROOMS, "daily", 700, -21.0, 0.40, ar=(0.7,),
         description="Freezer room 1, daily mean air temperature (deg C)."),
    Spec("polarquay/freezer-2/temp-c", ROOMS, "daily", 690, -20.0, 0.35, ma=(0.6,),
         description="Freezer room 2, daily mean air temperature (deg C)."),
    Spec("polarquay/freezer-3/temp-c", ROOMS, "daily", 680, -22.0, 0.30, ar=(0.5, 0.3),
         description="Freezer room 3, daily mean air temperature (deg C)."),
    Spec("polarquay/freezer-4/temp-c", ROOMS, "daily", 670, -20.5, 0.30, ar=(0.7,), ma=(0.4,),
         description="Freezer room 4, daily mean air temperature (deg C)."),
    Spec("polarquay/freezer-5/temp-c", ROOMS, "daily", 365, -19.5, 0.45,
         description="Freezer room 5, daily mean air temperature (deg C)."),
    Spec("polarquay/freezer-6/temp-c", ROOMS, "daily", 420, -23.0, 0.25, ar=(0.8,), awkwardness="gap",
         description="Freezer room 6, daily mean air temperature (deg C); the logger was away for recalibration."),
    Spec("polarquay/blast-freezer/temp-c", ROOMS, "daily", 300, -32.0, 0.60, ma=(0.6, 0.3),
         description="Blast freezer, daily mean air temperature (deg C)."),
    Spec("polarquay/chiller-1/temp-c", ROOMS, "daily", 500, 3.0, 0.30, ar=(0.5,),
         description="Chiller room 1, daily mean air temperature (deg C)."),
    Spec("polarquay/chiller-2/temp-c", ROOMS, "daily", 450, 3.5, 0.25, ar=(1.0, -0.5),
         description="Chiller room 2, daily mean air temperature (deg C); pseudo-cyclic AR(2)."),
    Spec("polarquay/chiller-3/temp-c", ROOMS, "daily", 380, 2.5, 0.30, ma=(-0.5,),
         description="Chiller room 3, daily mean air temperature (deg C)."),
    Spec("polarquay/chiller-4/temp-c", ROOMS, "daily", 330, 4.0, 0.30, ar=(0.6,), ma=(0.5,),
         description="Chiller room 4, daily mean air temperature (deg C)."),
    Spec("polarquay/chiller-5/temp-c", ROOMS, "daily", 120, 4.0, 0.0, awkwardness="constant",
         description="Chiller room 5, daily mean air temperature (deg C); the sensor froze at 4.0 after a firmware fault."),
    Spec("polarquay/anteroom/temp-c", ROOMS, "daily", 260, 8.0, 0.70, ar=(0.65,), awkwardness="outlier",
         description="Loading anteroom, daily mean air temperature (deg C); one day the dock door was wedged open."),
    Spec("polarquay/chiller-1/humidity-pct", HUMIDITY, "daily", 500, 88.0, 1.5,
         description="Chiller room 1, daily mean relative humidity (%)."),
    Spec("polarquay/chiller-2/humidity-pct", HUMIDITY, "daily", 450, 86.0, 1.2, ar=(0.6,),
         description="Chiller room 2, daily mean relative humidity (%)."),
    Spec("polarquay/chiller-3/humidity-pct", HUMIDITY, "daily", 380, 90.0, 1.0, ma=(0.5, 0.4),
         description="Chiller room 3, daily mean relative humidity (%)."),
    Spec("polarquay/chiller-4/humidity-pct", HUMIDITY, "daily", 330, 85.0, 1.3, ar=(0.5,), awkwardness="level_shift",
         description="Chiller room 4, daily mean relative humidity (%); the humidifier was replaced."),
    Spec("polarquay/compressor-a/energy-kwh", ENERGY, "daily", 640, 1150.0, 12.0, d=1, drift=0.8,
         description="Compressor A, energy per day (kWh); random walk with drift as the unit ages."),
    Spec("polarquay/compressor-b/energy-kwh", ENERGY, "daily", 600, 980.0, 10.0, d=1,
         description="Compressor B, energy per day (kWh); random walk without drift."),
    Spec("polarquay/compressor-c/energy-kwh", ENERGY, "daily", 560, 1320.0, 15.0, d=1, ma=(-0.6,),
         description="Compressor C, energy per day (kWh)."),
    Spec("polarquay/compressor-d/energy-kwh", ENERGY, "daily", 520, 870.0, 5.0, d=1, ar=(0.5,),
         description="Compressor D, energy per day (kWh)."),
    Spec("polarquay/condenser-fans/energy-kwh", ENERGY, "daily", 410, 310.0, 5.0, d=1, ma=(0.4,),
         description="Condenser fans, energy per day (kWh)."),
    Spec("polarquay/blast-freezer/energy-kwh", ENERGY, "daily", 280, 640.0, 3.0, d=1, ar=(0.6,),
         description="Blast freezer, energy per day (kWh)."),
    Spec("polarquay/site/energy-kwh", ENERGY, "daily", 240, 4800.0, 10.0, d=1, ma=(-0.5,), seasonal_d=1,
         seasonal_ma=(-0.85,), season_amplitude=250.0,
         description="Whole site, energy per day (kWh); busiest before the weekend, quiet on Sundays."),
    Spec("polarquay/dock-door-1/openings", DOORS, "daily", 540, 140.0, 12.0, ar=(0.4,), seasonal_ar=(0.6,), decimals=0,
         description="Dock door 1, openings per day."),
    Spec("polarquay/dock-door-2/openings", DOORS, "daily", 500, 110.0, 9.0, ma=(0.3,), seasonal_d=1,
         seasonal_ma=(-0.8,), season_amplitude=40.0, decimals=0,
         description="Dock door 2, openings per day; busiest on Saturdays, quiet on Sundays."),
    Spec("polarquay/dock-door-3/openings", DOORS, "daily", 450, 75.0, 8.0, ar=(0.55,), decimals=0,
         description="Dock door 3, openings per day."),
    Spec("polarquay/freezer-1/door-openings", DOORS, "daily", 400, 48.0, 6.0, decimals=0,
         description="Freezer room 1 personnel door, openings per day."),
    Spec("polarquay/freezer-1/defrost-min", DEFROST, "daily", 600, 96.0, 4.0,
         description="Freezer room 1, minutes of defrost per day."),
    Spec("polarquay/freezer-2/defrost-min", DEFROST, "daily", 550, 88.0, 3.5, ma=(0.4,),
         description="Freezer room 2, minutes of defrost per day."),
    Spec("polarquay/freezer-3/defrost-min", DEFROST, "daily", 500, 104.0, 4.0, ar=(0.5,),
         description="Freezer room 3, minutes of defrost per day."),
    Spec("polarquay/freezer-4/defrost-min", DEFROST, "daily", 300, 92.0, 3.0, ar=(1.0, -0.5),
         description="Freezer room 4, minutes of defrost per day."),
    Spec("polarquay/forklift-1/charge-kwh", FORKLIFTS, "daily", 330, 38.0, 3.0,
         description="Forklift 1, battery charging energy per day (kWh)."),
    Spec("polarquay/forklift-2/charge-kwh", FORKLIFTS, "daily", 300, 41.0, 3.0, ar=(0.55,),
         description="Forklift 2, battery charging energy per day (kWh)."),
    Spec("polarquay/forklift-3/charge-kwh", FORKLIFTS, "daily", 240, 36.0, 2.5, ma=(0.7,),
         description="Forklift 3, battery charging energy per day (kWh)."),
    Spec("polarquay/loading-dock/air-temp-c", HOURLY, "hourly", 696, 9.0, 0.40, ar=(0.6,), seasonal_d=1,
         seasonal_ma=(-0.7,), season_amplitude=3.0,
         description="Loading dock, hourly air temperature (deg C); follows the outdoor day."),
    Spec("polarquay/plant-room/power-kw", HOURLY, "hourly", 672, 210.0, 1.0, d=1, ma=(-0.4,), seasonal_d=1,
         seasonal_ma=(-0.9,), season_amplitude=25.0,
         description="Plant room, hourly mean electrical power (kW); peaks in the afternoon."),
    Spec("polarquay/freezer-1/temp-c-hourly", HOURLY, "hourly", 600, -21.0, 0.15, ar=(0.5,), seasonal_ar=(0.6,),
         description="Freezer room 1, hourly air temperature (deg C); defrost runs at similar hours each day."),
    Spec("polarquay/chiller-2/humidity-pct-hourly", HOURLY, "hourly", 504, 86.0, 0.8, seasonal_ar=(0.7,),
         description="Chiller room 2, hourly relative humidity (%)."),
]

BAKERY_DAILY = [
    sales("riverside", "sourdough", 620, 140.0, 12.0, ar=(0.6,)),
    sales("riverside", "white-tin", 620, 210.0, 15.0),
    sales("riverside", "rye", 620, 45.0, 5.0, ma=(0.5,)),
    sales("riverside", "croissant", 600, 160.0, 10.0, ma=(0.3,), seasonal_d=1, seasonal_ma=(-0.8,),
          season_amplitude=30.0, note="Weekly pattern: Saturday peak."),
    sales("riverside", "cinnamon-bun", 580, 90.0, 7.0, ar=(0.5, 0.3)),
    sales("riverside", "seeded-batch", 560, 60.0, 5.0, ar=(0.7,), ma=(0.4,)),
    sales("riverside", "focaccia", 540, 70.0, 6.0, ar=(0.5,), seasonal_ar=(0.6,)),
    sales("riverside", "cardamom-knot", 400, 60.0, 2.0, d=1, drift=0.12, note="A new line that keeps gaining customers."),
    sales("riverside", "scone", 480, 55.0, 5.0, ma=(0.5, 0.3)),
    sales("riverside", "baguette", 450, 120.0, 6.0, d=1, ma=(-0.7,)),
    sales("millgate", "sourdough", 500, 110.0, 9.0, ar=(0.75,)),
    sales("millgate", "white-tin", 480, 240.0, 8.0, ar=(0.4,), seasonal_d=1, seasonal_ma=(-0.8,),
          season_amplitude=35.0, note="Weekly pattern: Saturday peak."),
    sales("millgate", "rye", 460, 40.0, 5.0),
    sales("millgate", "croissant", 440, 180.0, 12.0, ar=(0.3,), seasonal_ar=(0.7,)),
    sales("millgate", "cinnamon-bun", 420, 75.0, 7.0, ma=(-0.4,)),
    sales("millgate", "seeded-batch", 400, 65.0, 6.0, ar=(0.5,)),
    sales("millgate", "focaccia", 240, 150.0, 2.5, d=1, ar=(0.4,)),
    sales("millgate", "scone", 360, 50.0, 4.0, ar=(0.7,), ma=(0.4,)),
    sales("millgate", "baguette", 350, 130.0, 8.0, ma=(0.4,), seasonal_d=1, seasonal_ma=(-0.7,),
          season_amplitude=20.0, note="Weekly pattern: Saturday peak."),
    sales("millgate", "pretzel", 330, 70.0, 5.0, ar=(1.0, -0.5)),
    sales("old-tannery", "sourdough", 400, 95.0, 9.0),
    sales("old-tannery", "white-tin", 380, 150.0, 11.0, ar=(0.6,)),
    sales("old-tannery", "rye", 360, 55.0, 1.5, d=1),
    sales("old-tannery", "croissant", 350, 120.0, 8.0, ar=(0.5,), seasonal_d=1, seasonal_ma=(-0.6,),
          season_amplitude=25.0, note="Weekly pattern: Saturday peak."),
    sales("old-tannery", "cinnamon-bun", 320, 85.0, 6.0, ma=(0.7,)),
    sales("old-tannery", "seeded-batch", 300, 45.0, 4.0, ar=(0.5, 0.3)),
    sales("old-tannery", "focaccia", 280, 62.0, 6.0),
    sales("old-tannery", "scone", 260, 70.0, 3.0, d=1, ma=(-0.5,)),
    sales("old-tannery", "baguette", 240, 100.0, 8.0, ar=(0.5,), ma=(0.5,)),
    sales("old-tannery", "pretzel", 220, 58.0, 6.0, ar=(0.4,), seasonal_ar=(0.5,)),
    sales("station-row", "sourdough", 240, 85.0, 8.0, ar=(0.5,)),
    sales("station-row", "white-tin", 230, 190.0, 10.0, ma=(0.3,), seasonal_d=1, seasonal_ma=(-0.7,),
          season_amplitude=30.0, note="Weekly pattern: Saturday peak."),
    sales("station-row", "rye", 210, 38.0, 4.0),
    sales("station-row", "croissant", 150, 260.0, 4.0, d=1, ma=(-0.4,), seasonal_d=1, seasonal_ma=(-0.9,),
          season_amplitude=40.0, note="Weekly pattern: Saturday peak."),
    sales("station-row", "cinnamon-bun", 180, 70.0, 6.0, ma=(0.6, 0.3)),
    sales("station-row", "seeded-batch", 160, 50.0, 4.0, ar=(0.7,)),
    sales("station-row", "focaccia", 140, 40.0, 2.0, d=1, drift=0.2, note="Word of mouth: sales keep rising."),
    sales("station-row", "scone", 120, 44.0, 5.0, ma=(0.5,)),
    sales("station-row", "baguette", 90, 105.0, 9.0),
    sales("station-row", "coffee-cake", 60, 40.0, 4.0, ar=(0.6,), note="On sale for two months only."),
    sales("station-row", "sandwich-loaf", 8, 35.0, 4.0, awkwardness="very_short",
          note="Added to the range eight days ago."),
]

BAKERY_MONTHLY = [
    Spec("hearthloaf/chain/flour-kg", MONTHLY, "monthly", 180, 9.8, 0.03, ar=(0.5,), seasonal_d=1, seasonal_ma=(-0.6,),
         drift=0.06, season_amplitude=0.10, transform="log", decimals=1,
         description="Flour bought per month by the whole chain (kg); about 6% more each year, December peak."),
    Spec("hearthloaf/chain/butter-kg", MONTHLY, "monthly", 150, 8.0, 0.03, d=1, ma=(-0.5,), drift=0.004,
         transform="log", decimals=1, description="Butter bought per month by the whole chain (kg)."),
    Spec("hearthloaf/chain/sugar-kg", MONTHLY, "monthly", 120, 7.4, 0.03, d=1, ar=(0.4,), drift=0.003,
         transform="log", decimals=1, description="Sugar bought per month by the whole chain (kg)."),
    Spec("hearthloaf/riverside/monthly-sales", MONTHLY, "monthly", 168, 10.6, 0.025, d=1, ma=(-0.4,), seasonal_d=1,
         seasonal_ma=(-0.9,), season_amplitude=0.12, transform="log", decimals=2,
         description="Riverside shop, takings per month (currency units); December peak."),
    Spec("hearthloaf/millgate/monthly-sales", MONTHLY, "monthly", 132, 10.3, 0.03, ma=(0.3,), seasonal_d=1,
         seasonal_ma=(-0.7,), drift=0.08, season_amplitude=0.12, transform="log", decimals=2,
         description="Millgate shop, takings per month (currency units); about 8% growth a year."),
    Spec("hearthloaf/old-tannery/monthly-sales", MONTHLY, "monthly", 108, 10.0, 0.03, d=1, ma=(-0.5,), seasonal_d=1,
         seasonal_ma=(-0.85,), season_amplitude=0.10, transform="log", decimals=2,
         description="Old Tannery shop, takings per month (currency units); December peak."),
    Spec("hearthloaf/station-row/monthly-sales", MONTHLY, "monthly", 60, 9.6, 0.04, ma=(0.4,), seasonal_d=1,
         seasonal_ma=(-0.6,), drift=0.15, season_amplitude=0.10, transform="log", decimals=2,
         description="Station Row shop, takings per month (currency units); a young shop growing fast."),
    Spec("hearthloaf/chain/van-km", MONTHLY, "monthly", 120, 8200.0, 300.0, ar=(0.4,), seasonal_ar=(0.6,), decimals=0,
         description="Delivery vans, kilometres driven per month."),
    Spec("hearthloaf/chain/staff-hours", MONTHLY, "monthly", 96, 5400.0, 120.0, ar=(0.6,), decimals=0,
         description="Hours worked per month across the chain."),
    Spec("hearthloaf/chain/complaints", MONTHLY, "monthly", 84, 22.0, 4.0, decimals=0,
         description="Customer complaints per month across the chain."),
    Spec("hearthloaf/chain/oven-gas-kwh", MONTHLY, "monthly", 72, 31000.0, 900.0, ma=(0.5,), decimals=0,
         description="Gas burnt by the ovens per month (kWh)."),
]

SPECS = COLD_STORE + BAKERY_DAILY + BAKERY_MONTHLY


def timestamps(spec: Spec) -> pd.DatetimeIndex:
    """The regular grid of a series: ``n`` steps ending on the shared last date."""
    return pd.date_range(end=END[spec.frequency], periods=spec.n, freq=PANDAS_FREQ[spec.frequency])


def calendar_profile(spec: Spec, index: pd.DatetimeIndex) -> np.ndarray:
    """The fixed seasonal shape at each timestamp, scaled by ``season_amplitude``."""
    if not spec.season_amplitude:
        return np.zeros(spec.n)
    if spec.frequency == "hourly":
        shape = HOURLY_PROFILE[index.hour]
    elif spec.frequency == "daily":
        shape = WEEKLY_PROFILE[index.day_of_week]
    else:
        shape = MONTHLY_PROFILE[index.month - 1]
    return spec.season_amplitude * np.asarray(shape)


def integrate(w: np.ndarray, d: int, seasonal_d: int, s: int) -> np.ndarray:
    """Undo ``(1 - L)^d (1 - L^s)^D``, starting from zeros before the first value."""
    x = w
    for _ in range(seasonal_d):
        padded = np.r_[x, np.zeros(-len(x) % s)]
        x = padded.reshape(-1, s).cumsum(axis=0).ravel()[: len(w)]
    for _ in range(d):
        x = np.cumsum(x)
    return x


def simulate(spec: Spec, index: pd.DatetimeIndex) -> np.ndarray:
    """Simulate one series on its grid (before the deliberate defects and rounding).

    A stationary series is drawn with :data:`BURN_IN` discarded steps, so it starts in its
    stationary distribution. An integrated series has no such distribution; it starts at rest
    (no innovations before the first point), because innovations from a burn-in would enter
    the first season of its moving-average part and, once integrated, become a spurious
    trend. Then the drift is added, the differencing is undone, and the level and calendar
    profile are added; ``exp`` is taken last for log-transformed series.
    """
    if spec.scale == 0:
        return np.full(spec.n, spec.level)
    rng = np.random.default_rng([SEED, zlib.crc32(spec.series_id.encode())])
    burn_in = 0 if spec.d or spec.seasonal_d else BURN_IN
    w = spec.arma_process().generate_sample(spec.n, scale=spec.scale, distrvs=rng.standard_normal, burnin=burn_in)
    x = integrate(w + spec.drift, spec.d, spec.seasonal_d, PERIOD[spec.frequency])
    y = spec.level + calendar_profile(spec, index) + x
    return np.exp(y) if spec.transform == "log" else y


def add_defect(spec: Spec, values: np.ndarray, index: pd.DatetimeIndex) -> tuple[np.ndarray, np.ndarray, str]:
    """Apply the series' deliberate defect.

    Returns the values (NaN for an empty cell), a mask of the rows kept in the file, and a
    sentence for the description.
    """
    values, keep = values.copy(), np.ones(spec.n, dtype=bool)
    fmt = TIME_FORMAT[spec.frequency]
    if spec.awkwardness == "gap":
        start, blank = int(0.4 * spec.n), int(0.75 * spec.n)
        keep[start: start + GAP_RUN] = False
        values[blank] = np.nan
        return values, keep, (
            f"No rows from {index[start]:{fmt}} to {index[start + GAP_RUN - 1]:{fmt}} ({GAP_RUN} timestamps); "
            f"an empty value on {index[blank]:{fmt}}."
        )
    if spec.awkwardness == "level_shift":
        at = int(0.55 * spec.n)
        values[at:] += LEVEL_SHIFT_SIZE * spec.scale
        return values, keep, f"Level shift of +{LEVEL_SHIFT_SIZE * spec.scale:g} from {index[at]:{fmt}} on."
    if spec.awkwardness == "outlier":
        at = int(0.65 * spec.n)
        values[at] += OUTLIER_SIZE * spec.scale
        return values, keep, f"One outlier (+{OUTLIER_SIZE * spec.scale:g}) on {index[at]:{fmt}}."
    return values, keep, ""


def format_value(value: float, decimals: int) -> str:
    """Fixed decimals; an empty cell for a missing value; never ``-0``."""
    if np.isnan(value):
        return ""
    return f"{round(float(value), decimals) + 0.0:.{decimals}f}"


def truth_row(spec: Spec, defect_note: str) -> list:
    """The truth.csv row of one series."""
    coefficients = {
        "ar": list(spec.ar), "ma": list(spec.ma),
        "seasonal_ar": list(spec.seasonal_ar), "seasonal_ma": list(spec.seasonal_ma),
        "drift": spec.drift, "sigma": spec.scale, "level": spec.level,
    }
    return [
        spec.series_id, spec.group, spec.frequency, spec.n, spec.process_name,
        len(spec.ar), spec.d, len(spec.ma),
        len(spec.seasonal_ar), spec.seasonal_d, len(spec.seasonal_ma), spec.period or "",
        spec.transform, json.dumps(coefficients), spec.awkwardness,
        " ".join(filter(None, [spec.description, defect_note])),
    ]


def build(specs: list[Spec]) -> tuple[str, str]:
    """The text of portfolio.csv and truth.csv."""
    ids = [spec.series_id for spec in specs]
    duplicated = sorted({i for i in ids if ids.count(i) > 1})
    if duplicated:
        raise ValueError(f"series ids used twice: {', '.join(duplicated)}")
    portfolio, truth = io.StringIO(), io.StringIO()
    portfolio_writer = csv.writer(portfolio, lineterminator="\n")
    truth_writer = csv.writer(truth, lineterminator="\n")
    portfolio_writer.writerow(["series_id", "timestamp", "value"])
    truth_writer.writerow(TRUTH_COLUMNS)
    for spec in specs:
        index = timestamps(spec)
        values, keep, note = add_defect(spec, simulate(spec, index), index)
        stamps = index.strftime(TIME_FORMAT[spec.frequency])
        portfolio_writer.writerows(
            (spec.series_id, stamp, format_value(value, spec.decimals))
            for stamp, value, kept in zip(stamps, values, keep) if kept
        )
        truth_writer.writerow(truth_row(spec, note))
    return portfolio.getvalue(), truth.getvalue()


def write_atomically(path: Path, text: str) -> None:
    """Write through a temporary file in the same folder, so a failure leaves no half file."""
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.")
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="") as stream:
            stream.write(text)
        os.chmod(temporary, 0o644)  # mkstemp creates 0600; these are ordinary shared files
        os.replace(temporary, path)
    except BaseException:
        os.unlink(temporary)
        raise


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write Lagdesk's invented demo portfolio and its truth table.")
    parser.add_argument("output_dir", nargs="?", type=Path, default=Path(__file__).resolve().parent,
                        help="folder for portfolio.csv and truth.csv (default: the folder of this script)")
    args = parser.parse_args(argv)
    if not args.output_dir.is_dir():
        parser.error(f"output folder {args.output_dir} does not exist")
    portfolio, truth = build(SPECS)
    write_atomically(args.output_dir / "portfolio.csv", portfolio)
    write_atomically(args.output_dir / "truth.csv", truth)


if __name__ == "__main__":
    main()
