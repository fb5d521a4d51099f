"""Generate Lagdesk's invented demo portfolio and the truth behind it.

Usage::

    python demo_data/generate.py [OUTPUT_DIR]

writes ``portfolio.csv`` (long layout: ``series_id,timestamp,value``) and ``truth.csv`` (one
row per series: the process it was simulated from) into ``OUTPUT_DIR``, by default the folder
this file sits in. The output is the same byte for byte on every run: each series draws its
random numbers (innovations first, then any random defect) from
``numpy.random.default_rng([SEED, crc32(series_id)])``, so a series does not change when others
are added or reordered.

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

One series is not ARIMA at all: intermittent demand, simulated as is common practice for it by
a Bernoulli occurrence times a positive size, ``y_t = B_t (1 + N_t)`` with ``B_t ~ Bernoulli(p)``
and ``N_t ~ Poisson(lambda)`` independent. Its average inter-demand interval ``1/p`` is well
above the cut-off 1.32 of Syntetos, Boylan & Croston [2]_, and the squared coefficient of
variation of its sizes, ``lambda / (1 + lambda)^2``, below their 0.49, so it is "intermittent"
in their classification.

References
----------
.. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis:
   Forecasting and Control*, 5th ed., Wiley, ch. 3-4 (ARMA and ARIMA processes) and ch. 9
   (multiplicative seasonal models).
.. [2] Syntetos, A.A., Boylan, J.E. & Croston, J.D. (2005). On the categorization of demand
   patterns. *Journal of the Operational Research Society* 56, 495-503.
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
# A wireless logger's dropouts: runs of 1 to DROPOUT_MAX_RUN missing days, separated by
# Geometric(1 / DROPOUT_MEAN_SPACING) observed days, so about 2.5 / (2.5 + 16) = 14% of
# the days are missing; each run is either rows absent from the file or empty value cells.
DROPOUT_MAX_RUN = 4
DROPOUT_MEAN_SPACING = 16.0
AWKWARDNESS = ("", "gap", "level_shift", "outlier", "very_short", "constant", "dropouts", "intermittent")

TRUTH_COLUMNS = [
    "series_id", "group", "frequency", "n", "process", "order_p", "order_d", "order_q",
    "seasonal_P", "seasonal_D", "seasonal_Q", "period", "transform", "coefficients",
    "awkwardness", "description",
]


@dataclass(frozen=True)
class Spec:
    """One demo series: where it belongs, its process, its level and scale, its defect.

    ``level``, ``scale``, ``drift`` and ``season_amplitude`` are in data units, or in log
    units when ``transform == "log"``. ``scale == 0`` makes a constant series, unless
    ``demand_probability`` is set: then the series is intermittent demand, ``B_t (1 + N_t)`` with
    ``B_t ~ Bernoulli(demand_probability)`` and ``N_t ~ Poisson(extra_size_mean)``, and has no
    ARIMA part.
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
    demand_probability: float = 0.0
    extra_size_mean: float = 0.0

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
        if self.demand_probability:
            arima_terms = (self.ar, self.ma, self.d, self.seasonal_ar, self.seasonal_ma, self.seasonal_d, self.drift)
            if not 0 < self.demand_probability < 1 or self.extra_size_mean < 0 or any(arima_terms) or self.scale:
                raise ValueError(f"{self.series_id}: intermittent demand needs 0 < demand_probability < 1, "
                                 "extra_size_mean >= 0 and no ARIMA part")
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
        if self.demand_probability:
            return "intermittent demand"
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


def sold_per_day(shop: str, product: str) -> str:
    """The opening sentence of a daily sales series' description."""
    return f"{product.replace('-', ' ').capitalize()} sold per day at the {SHOP_NAMES[shop]} shop (items)."


def sales(shop: str, product: str, n: int, level: float, scale: float, note: str = "", **process) -> Spec:
    """A daily product-by-shop sales series of Hearthloaf Bakeries (whole items)."""
    return Spec(f"hearthloaf/{shop}/{product}", DAILY_SALES, "daily", n, level, scale, decimals=0,
                description=" ".join(filter(None, [sold_per_day(shop, product), note])), **process)


def intermittent_sales(shop: str, product: str, n: int, demand_probability: float, extra_size_mean: float,
                       note: str) -> Spec:
    """A daily sales series of Hearthloaf Bakeries that is intermittent demand, not ARIMA."""
    mean_size = 1 + extra_size_mean
    cv2 = extra_size_mean / mean_size**2
    process = (f"Not an ARIMA process: intermittent demand, a sale on a day with probability {demand_probability:g} "
               f"(average inter-demand interval {1 / demand_probability:.2f} days), of 1 + Poisson({extra_size_mean:g}) "
               f"items (mean {mean_size:g}, CV² {cv2:.2f}): 'intermittent' for Syntetos, Boylan & Croston (2005).")
    return Spec(f"hearthloaf/{shop}/{product}", DAILY_SALES, "daily", n, 0.0, 0.0, decimals=0,
                awkwardness="intermittent", demand_probability=demand_probability, extra_size_mean=extra_size_mean,
                description=" ".join([sold_per_day(shop, product), note, process]))


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
    Spec("polarquay/tempering-room/temp-c", ROOMS, "daily", 480, -4.0, 0.35, ar=(0.6,), awkwardness="dropouts",
         description="Tempering room, daily mean air temperature (deg C) from a battery-powered wireless logger "
                     "whose radio link to the gateway often drops out."),
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
    intermittent_sales("old-tannery", "celebration-cake", 540, 0.2, 0.8,
                       note="Special-order cakes, collected in the shop; most days none."),
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


def series_rng(spec: Spec) -> np.random.Generator:
    """The random numbers of one series, independent of every other series."""
    return np.random.default_rng([SEED, zlib.crc32(spec.series_id.encode())])


def simulate(spec: Spec, index: pd.DatetimeIndex, rng: np.random.Generator) -> np.ndarray:
    """Simulate one series on its grid (before the deliberate defects and rounding).

    A stationary series is drawn with :data:`BURN_IN` discarded steps, so it starts in its
    stationary distribution. An integrated series has no such distribution; it starts at rest
    (no innovations before the first point), because innovations from a burn-in would enter
    the first season of its moving-average part and, once integrated, become a spurious
    trend. Then the drift is added, the differencing is undone, and the level and calendar
    profile are added; ``exp`` is taken last for log-transformed series. Intermittent demand is
    drawn as occurrences times sizes instead.
    """
    if spec.demand_probability:
        occurs = rng.random(spec.n) < spec.demand_probability
        return np.where(occurs, 1 + rng.poisson(spec.extra_size_mean, spec.n), 0).astype(float)
    if spec.scale == 0:
        return np.full(spec.n, spec.level)
    burn_in = 0 if spec.d or spec.seasonal_d else BURN_IN
    w = spec.arma_process().generate_sample(spec.n, scale=spec.scale, distrvs=rng.standard_normal, burnin=burn_in)
    x = integrate(w + spec.drift, spec.d, spec.seasonal_d, PERIOD[spec.frequency])
    y = spec.level + calendar_profile(spec, index) + x
    return np.exp(y) if spec.transform == "log" else y


def dropout_runs(n: int, rng: np.random.Generator) -> list[tuple[int, int]]:
    """(start, length) of the missing runs of a dropout-heavy channel of ``n`` points.

    Each run is 1 to :data:`DROPOUT_MAX_RUN` long and follows at least one observed point; the
    last point is always observed, so the series keeps its first and last day.
    """
    runs: list[tuple[int, int]] = []
    t = 0
    while True:
        t += int(rng.geometric(1 / DROPOUT_MEAN_SPACING))
        length = int(rng.integers(1, DROPOUT_MAX_RUN + 1))
        if t + length >= n:
            return runs
        runs.append((t, length))
        t += length


def add_defect(spec: Spec, values: np.ndarray, index: pd.DatetimeIndex,
               rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, str]:
    """Apply the series' deliberate defect.

    Returns the values (NaN for an empty cell), a mask of the rows kept in the file, and a
    sentence for the description. ``rng`` is the series' own, already used for its values.
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
    if spec.awkwardness == "dropouts":
        runs = dropout_runs(spec.n, rng)
        as_empty_cells = rng.random(len(runs)) < 0.5
        for (start, length), empty in zip(runs, as_empty_cells):
            if empty:
                values[start: start + length] = np.nan
            else:
                keep[start: start + length] = False
        missing = sum(length for _, length in runs)
        absent = sum(length for (_, length), empty in zip(runs, as_empty_cells) if not empty)
        lengths = ", ".join(f"{k} x {m} days" for m in range(1, DROPOUT_MAX_RUN + 1)
                            if (k := sum(length == m for _, length in runs)))
        return values, keep, (
            f"{missing} of {spec.n} days ({missing / spec.n:.0%}) missing in {len(runs)} dropouts ({lengths}) "
            f"between {index[runs[0][0]]:{fmt}} and {index[runs[-1][0] + runs[-1][1] - 1]:{fmt}}: "
            f"{absent} days have no row, {missing - absent} an empty value cell."
        )
    return values, keep, ""


def format_value(value: float, decimals: int) -> str:
    """Fixed decimals; an empty cell for a missing value; never ``-0``."""
    if np.isnan(value):
        return ""
    return f"{round(float(value), decimals) + 0.0:.{decimals}f}"


def truth_row(spec: Spec, defect_note: str) -> list:
    """The truth.csv row of one series."""
    coefficients: dict[str, object] = {
        "ar": list(spec.ar), "ma": list(spec.ma),
        "seasonal_ar": list(spec.seasonal_ar), "seasonal_ma": list(spec.seasonal_ma),
    }
    if spec.demand_probability:
        coefficients |= {"demand_probability": spec.demand_probability, "extra_size_mean": spec.extra_size_mean}
    else:
        coefficients |= {"drift": spec.drift, "sigma": spec.scale, "level": spec.level}
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
        index, rng = timestamps(spec), series_rng(spec)
        values, keep, note = add_defect(spec, simulate(spec, index, rng), index, rng)
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
