"""Build the shipped demo history of the invented retailer Quillmarsh Provisions

Quillmarsh Provisions is an invented home-goods retailer (candles, cookware, bedding,
storage, garden goods); its analytics team tunes models on one table after another.
Every dataset here is simulated from a small generating model with interactions,
skewed columns, missing values and noise, so tuning matters and different model
families win on different tables. Nothing is real data.

For every dataset and model family the script really runs a seeded random sample of
configurations from an affordable part of the family's search space, scores each with
shuffled 3-fold cross-validation, and logs the study into a fresh history, which then
replaces ``--out`` as a whole. Data, fingerprints, configurations and scores are
deterministic; file names (random ids), timestamps and fit times are not.

Usage::

    python examples/make_demo_history.py [--out knowledge_base] [--only DATASET ...]

``--only`` rebuilds just the named datasets and copies every other study of the
existing history at ``--out`` unchanged. The script also writes the example dataset
``examples/quillmarsh_loyalty_churn.csv`` (not in the history) and its trials file.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
import traceback
import zlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import KFold, StratifiedKFold, cross_validate
from threadpoolctl import threadpool_limits

from warmstart.families import get_family
from warmstart.fingerprint import Fingerprint, fingerprint
from warmstart.history import KnowledgeBase
from warmstart.metrics import DEFAULT_METRIC
from warmstart.pipelines import make_pipeline
from warmstart.spaces import SearchSpace

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = Path(__file__).resolve().parent
BASE_SEED = 20240611
N_TRIALS = 11
N_FOLDS = 3
LABEL_PREFIX = "quillmarsh-"
CLS, REG = "classification", "regression"
HGB, RF, KNN, LIN = "hist_gradient_boosting", "random_forest", "knn", "linear"

# The affordable part of each family's space: tree counts and boosting rounds capped so
# the whole history builds in minutes on one core.
AFFORDABLE = {
    HGB: [{"name": "max_iter", "high": 200}, {"name": "max_leaf_nodes", "high": 64}],
    RF: [{"name": "n_estimators", "high": 100}, {"name": "max_depth", "high": 30}],
    KNN: [{"name": "n_neighbors", "high": 60}],
    LIN: [],
}


def seed_for(*parts: str) -> int:
    """A stable 32-bit seed from names (Python's ``hash`` is salted per process)."""
    return (BASE_SEED + zlib.crc32("/".join(parts).encode())) % 2**32


# -- generating helpers -------------------------------------------------------------------
def pick(rng: np.random.Generator, n: int, levels: list[str] | int, skew: float = 1.0,
         prefix: str = "") -> tuple[np.ndarray, np.ndarray]:
    """Draw ``n`` categorical values with Zipf-like frequencies (rank ** -skew).

    Returns (codes, labels): integer codes of shape (n,) and the labels as strings.
    """
    names = ([f"{prefix}{i:03d}" for i in range(levels)] if isinstance(levels, int)
             else list(levels))
    p = 1.0 / np.arange(1, len(names) + 1) ** skew
    codes = rng.choice(len(names), size=n, p=p / p.sum())
    return codes, np.asarray(names, dtype=object)[codes]


def effect(rng: np.random.Generator, codes: np.ndarray, scale: float = 1.0) -> np.ndarray:
    """A random additive effect per level, looked up for every row."""
    return rng.normal(0.0, scale, codes.max() + 1)[codes]


def zscore(x: np.ndarray) -> np.ndarray:
    return (x - np.nanmean(x)) / (np.nanstd(x) + 1e-12)


def binary(rng: np.random.Generator, signal: np.ndarray, rate: float,
           strength: float = 3.0) -> np.ndarray:
    """0/1 target: the top ``rate`` share of the standardised signal, times
    ``strength``, plus standard logistic noise is positive (a latent logit model)."""
    s = strength * zscore(signal) + rng.logistic(size=signal.size)
    return (s > np.quantile(s, 1.0 - rate)).astype(np.int64)


def multiclass(rng: np.random.Generator, scores: np.ndarray, labels: list[str],
               noise: float = 1.0) -> np.ndarray:
    """Labels by the arg-max of per-class scores (n, k) plus Gumbel noise (a logit model)."""
    s = scores + noise * rng.gumbel(size=scores.shape)
    return np.asarray(labels, dtype=object)[np.argmax(s, axis=1)]


def holes(rng: np.random.Generator, x: np.ndarray, frac: float,
          by: np.ndarray | None = None, strength: float = 2.0) -> np.ndarray:
    """Blank out about ``frac`` of ``x``: at random, or more often where ``by`` is high
    (missing not at random when ``by`` is ``x`` itself or the target)."""
    n = len(x)
    if by is None:
        p = np.full(n, frac)
    else:
        w = 1.0 / (1.0 + np.exp(-strength * zscore(np.asarray(by, dtype=float))))
        p = np.clip(w * frac / w.mean(), 0.0, 0.95)
    mask = rng.random(n) < p
    if x.dtype == object:
        out = x.copy()
        out[mask] = None
        return out
    out = x.astype(float)
    out[mask] = np.nan
    return out


def dates(rng: np.random.Generator, n: int, start: str, days: int) -> np.ndarray:
    return (pd.Timestamp(start) + pd.to_timedelta(rng.integers(0, days, n), unit="D")).values


CATEGORIES = ["candles", "cookware", "bedding", "storage", "garden", "lighting", "tableware",
              "textiles", "bath", "cleaning"]
REGIONS = ["north", "south", "east", "west", "central", "coastal"]
CHANNELS = ["store", "web", "app", "phone"]


# -- the datasets ---------------------------------------------------------------------------
@dataclass(frozen=True)
class DemoDataset:
    """One simulated table: its name, target, task, families to study and builder."""

    name: str
    target: str
    task: str
    families: tuple[str, ...]
    build: Callable[[np.random.Generator], pd.DataFrame]

    def frame(self) -> pd.DataFrame:
        return self.build(np.random.default_rng(seed_for("data", self.name)))


DATASETS: dict[str, DemoDataset] = {}


def dataset(name: str, target: str, task: str, families: tuple[str, ...] = (HGB, RF)):
    def register(build):
        DATASETS[name] = DemoDataset(name, target, task, families, build)
        return build
    return register


@dataset("loyalty-lapse", "lapsed", CLS, (HGB, RF, LIN))
def _loyalty_lapse(rng):
    n = 3600
    tenure = rng.gamma(2.0, 14.0, n)
    visits = rng.poisson(np.exp(1.5 - tenure / 120), n)
    spend = rng.lognormal(4.0, 0.9, n)
    days_since = rng.exponential(45, n)
    tier_c, tier = pick(rng, n, ["bronze", "silver", "gold", "ember"], 0.8)
    ch_c, channel = pick(rng, n, CHANNELS, 0.7)
    email_opt = rng.random(n) < 0.6
    complaints = rng.poisson(0.3, n)
    region_c, region = pick(rng, n, REGIONS, 0.4)
    sig = (0.03 * days_since - 0.5 * np.log1p(visits) - 0.3 * np.log(spend) - 0.4 * tier_c
           + 0.7 * complaints * (tier_c >= 2) - 0.5 * email_opt + effect(rng, ch_c, 0.4)
           + 0.01 * tenure * (ch_c == 1))
    y = binary(rng, sig, 0.2, strength=2.5)
    return pd.DataFrame({
        "tenure_months": tenure.round(1), "visits_90d": visits,
        "spend_12m": holes(rng, spend.round(2), 0.08, by=-spend),
        "days_since_purchase": days_since.round(0), "tier": tier, "channel": channel,
        "email_opt_in": email_opt, "complaints_12m": complaints, "region": region,
        "avg_basket": holes(rng, (spend / (visits + 1)).round(2), 0.05),
        "app_sessions_30d": rng.poisson(2.0 + 3 * (ch_c == 2), n),
        "returns_12m": rng.poisson(0.5, n), "lapsed": y,
    })


@dataset("returns-card-fraud", "fraudulent", CLS)
def _returns_fraud(rng):
    n = 6000
    amount = rng.lognormal(3.6, 1.1, n)
    store_c, store = pick(rng, n, 120, 0.9, "store_")
    hour = rng.integers(8, 22, n)
    no_receipt = rng.random(n) < 0.15
    returns_30d = rng.negative_binomial(1, 0.6, n)
    card_age = rng.exponential(900, n)
    cat_c, cat = pick(rng, n, CATEGORIES, 0.6)
    sig = (0.9 * np.log(amount) + 1.4 * no_receipt + 0.6 * returns_30d - 0.002 * card_age
           + 0.8 * (hour >= 20) * no_receipt + effect(rng, store_c, 0.8) + effect(rng, cat_c, 0.5))
    y = binary(rng, sig, 0.02, strength=4.5)
    cols = {"amount": amount.round(2), "store": store, "hour": hour, "no_receipt": no_receipt,
            "returns_30d": returns_30d, "card_age_days": holes(rng, card_age.round(0), 0.06),
            "category": cat, "items": 1 + rng.poisson(0.8, n),
            "staff_override": rng.random(n) < 0.05 + 0.1 * no_receipt,
            "distance_home_km": holes(rng, rng.lognormal(1.8, 0.9, n).round(1), 0.12)}
    for i in range(8):  # terminal telemetry, mostly noise
        cols[f"terminal_signal_{i}"] = rng.normal(0, 1, n).round(3)
    cols["fraudulent"] = y
    return pd.DataFrame(cols)


@dataset("store-week-demand", "units_sold", REG)
def _store_week_demand(rng):
    n = 5000
    store_c, store = pick(rng, n, 40, 0.3, "store_")
    cat_c, cat = pick(rng, n, CATEGORIES, 0.5)
    week = dates(rng, n, "2022-01-03", 728)
    woy = pd.DatetimeIndex(week).isocalendar().week.to_numpy().astype(float)
    price = rng.lognormal(2.5, 0.4, n)
    promo = rng.random(n) < 0.2
    season = np.sin(2 * np.pi * (woy - 10) / 52) * (cat_c == 4) + (woy > 46) * (cat_c == 0)
    mu = np.exp(2.5 + effect(rng, store_c, 0.4) + effect(rng, cat_c, 0.6) - 0.6 * np.log(price)
                + 0.5 * promo + 0.8 * season + 0.3 * promo * (cat_c < 3))
    units = rng.poisson(mu * rng.gamma(5.0, 0.2, n))
    return pd.DataFrame({
        "store": store, "category": cat, "week_start": week, "avg_price": price.round(2),
        "on_promo": promo, "flyer_pages": rng.integers(0, 6, n),
        "temperature_c": holes(rng, (12 + 10 * np.sin(2 * np.pi * (woy - 15) / 52)
                                     + rng.normal(0, 3, n)).round(1), 0.04),
        "stock_start": (mu * rng.uniform(1.2, 3, n)).round(0),
        "competitor_promo": rng.random(n) < 0.15, "footfall_index": rng.normal(100, 15, n).round(1),
        "region": np.asarray(REGIONS, dtype=object)[store_c % 6],
        "units_sold": units.astype(float),
    })


@dataset("delivery-delay-minutes", "delay_minutes", REG)
def _delivery_delay(rng):
    n = 4000
    dist = rng.lognormal(2.6, 0.7, n)
    stops = rng.poisson(14, n) + 1
    depot_c, depot = pick(rng, n, 8, 0.5, "depot_")
    hour = rng.integers(6, 20, n)
    rain = rng.exponential(1.0, n) * (rng.random(n) < 0.3)
    bulky = rng.random(n) < 0.25
    driver_exp = rng.gamma(2.0, 2.0, n)
    delay = (2.0 * np.sqrt(dist) + 0.8 * stops * (1 + 0.3 * rain) + 15 * bulky * (stops > 15)
             + 10 * ((hour >= 16) & (hour <= 18)) - 2.0 * np.log1p(driver_exp)
             + effect(rng, depot_c, 6.0) + rng.gamma(1.5, 6.0, n))
    cols = {"distance_km": dist.round(1), "stops": stops, "depot": depot, "hour": hour,
            "rain_mm": holes(rng, rain.round(1), 0.1), "bulky": bulky,
            "driver_years": holes(rng, driver_exp.round(1), 0.15, by=driver_exp),
            "van_age_years": rng.integers(0, 12, n), "weekday": rng.integers(0, 7, n),
            "parcels": stops + rng.poisson(6, n), "weight_kg": rng.lognormal(4.5, 0.6, n).round(0),
            "road_works": rng.random(n) < 0.08}
    for i in range(4):
        cols[f"traffic_probe_{i}"] = holes(rng, rng.normal(0, 1, n).round(2), 0.1)
    cols["delay_minutes"] = delay.round(1)
    return pd.DataFrame(cols)


@dataset("forklift-failure", "failed_within_30d", CLS)
def _forklift(rng):
    n = 2500
    hours = rng.gamma(3.0, 2000, n)
    vib = rng.lognormal(0.0, 0.5, n)
    temp = rng.normal(65, 8, n)
    model_c, model = pick(rng, n, ["lift-a", "lift-b", "lift-c", "lift-d"], 0.5)
    since_service = rng.exponential(90, n)
    sig = (0.0003 * hours + 1.5 * np.log(vib) * (model_c == 2) + 0.08 * (temp - 65)
           + 0.01 * since_service + 0.8 * (vib > 1.6) * (temp > 70))
    y = binary(rng, sig, 1 / 16, strength=4.0)
    cols = {"engine_hours": hours.round(0), "model": model,
            "days_since_service": since_service.round(0)}
    for i in range(8):  # vibration and temperature sensors, correlated with the true values
        cols[f"vibration_s{i}"] = holes(rng, (vib * rng.lognormal(0, 0.2, n)).round(3), 0.2,
                                        by=vib)
        cols[f"temp_s{i}"] = holes(rng, (temp + rng.normal(0, 3, n)).round(1), 0.1)
    cols["battery_cycles"] = rng.poisson(hours / 10)
    cols["load_mean_kg"] = rng.normal(800, 200, n).round(0)
    cols["warehouse_id"] = rng.integers(1, 6, n)
    cols["failed_within_30d"] = y
    return pd.DataFrame(cols)


@dataset("warranty-claim", "claimed", CLS)
def _warranty(rng):
    n = 3000
    sku_c, sku = pick(rng, n, 400, 1.1, "sku_")
    price = rng.lognormal(4.0, 0.8, n)
    supplier_c, supplier = pick(rng, n, 25, 0.8, "supplier_")
    cat_c, cat = pick(rng, n, CATEGORIES[:6], 0.4)
    extended = rng.random(n) < 0.2
    sig = (effect(rng, sku_c, 0.9) + effect(rng, supplier_c, 0.7) + 0.3 * np.log(price)
           + 1.0 * extended + 0.6 * (cat_c == 1) * extended)
    y = binary(rng, sig, 1 / 9)
    return pd.DataFrame({
        "sku": sku, "supplier": supplier, "category": cat, "price": price.round(2),
        "extended_cover": extended, "assembled_by_us": rng.random(n) < 0.3,
        "purchase_date": dates(rng, n, "2021-06-01", 900), "units": 1 + rng.poisson(0.3, n),
        "customer_age_band": pick(rng, n, ["18-29", "30-44", "45-59", "60+"], 0.2)[1],
        "delivery_damage_flag": rng.random(n) < 0.04, "claimed": y,
    })


@dataset("supplier-late-delivery", "late", CLS, (HGB, RF, LIN))
def _supplier_late(rng):
    n = 1500
    supplier_c, supplier = pick(rng, n, 30, 0.7, "supplier_")
    lead = rng.gamma(4.0, 5.0, n)
    qty = rng.lognormal(5.0, 1.0, n)
    overseas = rng.random(n) < 0.35
    backlog = rng.poisson(3, n)
    sig = (effect(rng, supplier_c, 0.8) - 0.03 * lead + 0.25 * np.log(qty) + 0.9 * overseas
           + 0.2 * backlog)
    y = binary(rng, sig, 0.27, strength=2.0)
    return pd.DataFrame({
        "supplier": supplier, "promised_lead_days": lead.round(0), "order_qty": qty.round(0),
        "overseas": overseas, "open_orders": backlog,
        "past_late_rate": holes(rng, np.clip(0.2 + 0.1 * effect(rng, supplier_c, 1.0)
                                             + rng.normal(0, 0.05, n), 0, 1).round(3), 0.12),
        "season_q": rng.integers(1, 5, n), "pallets": 1 + (qty / 200).round(0),
        "late": y,
    })


@dataset("call-centre-wait", "wait_seconds", REG, (HGB, RF, KNN))
def _call_wait(rng):
    n = 2200
    hour = rng.uniform(8, 20, n)
    agents = rng.integers(4, 20, n)
    queue = rng.poisson(np.exp(1.5 + 0.8 * np.sin((hour - 8) / 12 * np.pi)), n)
    topic_c, topic = pick(rng, n, ["order", "delivery", "refund", "product", "account"], 0.6)
    wait = np.exp(3.0 + 0.35 * queue / np.sqrt(agents) + effect(rng, topic_c, 0.3)
                  + rng.normal(0, 0.35, n))
    return pd.DataFrame({
        "hour": hour.round(2), "agents_on_shift": agents, "queue_length": queue,
        "topic": topic, "weekday": rng.integers(0, 7, n),
        "promo_day": rng.random(n) < 0.1, "callback_offered": rng.random(n) < 0.3,
        "ivr_steps": rng.integers(1, 6, n), "wait_seconds": wait.round(1),
    })


@dataset("basket-size", "basket_value", REG)
def _basket(rng):
    n = 7000
    store_c, store = pick(rng, n, 60, 0.6, "store_")
    member = rng.random(n) < 0.45
    items = 1 + rng.negative_binomial(2, 0.35, n)
    weekend = rng.random(n) < 0.3
    hour = rng.integers(8, 21, n)
    coupon = rng.random(n) < 0.12
    value = items * rng.lognormal(2.4 + 0.2 * member + effect(rng, store_c, 0.15), 0.5, n) \
        * (1 + 0.3 * coupon * member) * (1 + 0.15 * weekend)
    return pd.DataFrame({
        "store": store, "member": member, "items": items, "weekend": weekend, "hour": hour,
        "coupon_used": coupon, "channel": pick(rng, n, CHANNELS[:3], 1.0)[1],
        "visit_minutes": holes(rng, (5 + 2.5 * items + rng.exponential(5, n)).round(1), 0.2),
        "member_years": holes(rng, np.where(member, rng.gamma(2, 2, n), np.nan).round(1), 0.0),
        "basket_value": value.round(2),
    })


@dataset("markdown-uplift", "uplift_pct", REG, (HGB, RF, LIN))
def _markdown(rng):
    n = 1200
    depth = rng.choice([10, 15, 20, 25, 30, 40, 50], n).astype(float)
    cat_c, cat = pick(rng, n, CATEGORIES, 0.5)
    weeks_on_shelf = rng.gamma(3, 6, n)
    stock = rng.lognormal(4, 0.8, n)
    endcap = rng.random(n) < 0.3
    uplift = (1.6 * depth * (1 + effect(rng, cat_c, 0.3)) - 0.01 * depth ** 2 + 12 * endcap
              + 0.4 * weeks_on_shelf - 3 * np.log(stock) + 0.3 * depth * endcap
              + rng.normal(0, 8, n))
    return pd.DataFrame({
        "markdown_depth_pct": depth, "category": cat, "weeks_on_shelf": weeks_on_shelf.round(1),
        "stock_units": stock.round(0), "endcap": endcap,
        "base_weekly_units": rng.lognormal(3, 0.6, n).round(1),
        "price_before": rng.lognormal(3, 0.5, n).round(2),
        "store_cluster": pick(rng, n, ["c1", "c2", "c3", "c4"], 0.3)[1],
        "competitor_gap_pct": holes(rng, rng.normal(0, 8, n).round(1), 0.18),
        "email_feature": rng.random(n) < 0.2, "month": rng.integers(1, 13, n),
        "ly_uplift_pct": holes(rng, (0.6 * uplift + rng.normal(0, 15, n)).round(1), 0.25),
        "shelf_facings": rng.integers(1, 8, n), "uplift_pct": uplift.round(2),
    })


@dataset("return-reason", "reason", CLS)
def _return_reason(rng):
    n = 3500
    cat_c, cat = pick(rng, n, CATEGORIES, 0.5)
    price = rng.lognormal(3.5, 0.9, n)
    days = rng.gamma(2, 6, n)
    web = rng.random(n) < 0.5
    courier_c, courier = pick(rng, n, 6, 0.6, "courier_")
    size_opt = rng.random(n) < 0.3
    scores = np.column_stack([
        1.2 * web + effect(rng, courier_c, 0.8),                       # damaged
        0.8 * size_opt + 0.5 * (cat_c == 7),                            # wrong_size
        0.3 * np.log(price) - 0.05 * days,                             # changed_mind
        0.05 * days + 0.5 * (cat_c == 1) + effect(rng, cat_c, 0.5),    # faulty
        0.6 * web * (courier_c == 0),                                   # wrong_item
    ])
    reason = multiclass(rng, scores, ["damaged", "wrong_size", "changed_mind", "faulty",
                                      "wrong_item"], noise=0.8)
    cols = {"category": cat, "price": price.round(2), "days_since_purchase": days.round(0),
            "web_order": web, "courier": courier, "has_size_option": size_opt,
            "gift": rng.random(n) < 0.1, "member": rng.random(n) < 0.4,
            "items_in_order": 1 + rng.poisson(1.2, n), "photo_attached": rng.random(n) < 0.25,
            "refund_method": pick(rng, n, ["card", "voucher", "cash"], 0.7)[1],
            "region": pick(rng, n, REGIONS, 0.3)[1],
            "prior_returns": holes(rng, rng.poisson(0.6, n).astype(float), 0.1),
            "weight_kg": holes(rng, rng.lognormal(0.5, 0.8, n).round(2), 0.08),
            "review_stars": holes(rng, rng.integers(1, 6, n).astype(float), 0.22)}
    cols["reason"] = reason
    return pd.DataFrame(cols)


@dataset("delivery-slot-choice", "slot", CLS, (HGB, RF, KNN))
def _slot(rng):
    n = 2800
    commute = rng.gamma(2, 15, n)
    kids = rng.poisson(0.9, n)
    age = rng.uniform(20, 80, n)
    urban = rng.random(n) < 0.6
    scores = np.column_stack([
        0.04 * (age - 50),                                  # morning
        -0.02 * commute + 0.3 * kids,                       # midday
        0.03 * commute - 0.02 * (age - 50),                 # evening
        0.4 * urban + 0.2 * kids,                           # weekend
    ])
    slot = multiclass(rng, scores * 1.5, ["morning", "midday", "evening", "weekend"], 1.0)
    return pd.DataFrame({
        "commute_minutes": commute.round(0), "children": kids, "age": age.round(0),
        "urban": urban, "orders_12m": rng.poisson(3, n), "pets": rng.poisson(0.5, n),
        "home_size_m2": rng.lognormal(4.4, 0.35, n).round(0),
        "distance_to_depot_km": rng.lognormal(2, 0.6, n).round(1),
        "prefers_app": rng.random(n) < 0.5, "slot": slot,
    })


@dataset("damaged-in-transit", "damaged", CLS)
def _damaged(rng):
    n = 4500
    fragile = rng.random(n) < 0.3
    weight = rng.lognormal(1.5, 0.9, n)
    courier_c, courier = pick(rng, n, 7, 0.6, "courier_")
    pack_c, packaging = pick(rng, n, ["box", "double_box", "crate", "bag"], 0.8)
    hubs = rng.integers(1, 5, n)
    sig = (1.5 * fragile * (pack_c == 0) + 0.4 * np.log(weight) + 0.5 * hubs
           + effect(rng, courier_c, 0.7) - 1.0 * (pack_c == 2))
    y = binary(rng, sig, 1 / 26, strength=4.0)
    return pd.DataFrame({
        "fragile": fragile, "weight_kg": weight.round(2), "courier": courier,
        "packaging": packaging, "hubs": hubs, "category": pick(rng, n, CATEGORIES, 0.5)[1],
        "distance_km": rng.lognormal(4, 0.8, n).round(0), "insured": rng.random(n) < 0.2,
        "volume_l": holes(rng, (weight * rng.lognormal(1.5, 0.4, n)).round(1), 0.07),
        "packer_shift": pick(rng, n, ["early", "day", "late"], 0.2)[1],
        "peak_season": rng.random(n) < 0.25,
        "carton_strength": holes(rng, rng.normal(30, 5, n).round(1), 0.15), "damaged": y,
    })


@dataset("store-energy-use", "kwh_per_day", REG, (HGB, RF, LIN))
def _energy(rng):
    n = 800
    area = rng.lognormal(7.0, 0.4, n)
    temp = rng.normal(12, 8, n)
    hours = rng.integers(9, 15, n)
    led = rng.random(n) < 0.5
    kwh = (0.08 * area * (1 - 0.25 * led) + 6 * np.abs(temp - 16) + 20 * hours
           + rng.normal(0, 40, n))
    return pd.DataFrame({
        "floor_area_m2": area.round(0), "outdoor_temp_c": temp.round(1),
        "opening_hours": hours, "led_lighting": led, "freezer_units": rng.integers(0, 4, n),
        "building_age": holes(rng, rng.integers(1, 60, n).astype(float), 0.1),
        "region": pick(rng, n, REGIONS, 0.2)[1], "kwh_per_day": kwh.round(1),
    })


@dataset("candle-batch-grade", "grade", CLS, (HGB, RF, KNN))
def _candle(rng):
    n = 600
    wax_temp = rng.normal(80, 4, n)
    cool_min = rng.gamma(6, 5, n)
    fragrance = rng.uniform(4, 12, n)
    humidity = rng.uniform(30, 70, n)
    q = (-np.abs(wax_temp - 81) / 2 - np.abs(fragrance - 8) / 1.5 + 0.02 * cool_min
         - 0.03 * np.maximum(humidity - 55, 0) * fragrance / 8)
    q = zscore(q)
    scores = np.column_stack([1.5 * q, np.full(n, 0.6), -1.5 * q])
    grade = multiclass(rng, scores, ["A", "B", "C"], 0.8)
    return pd.DataFrame({"wax_temp_c": wax_temp.round(1), "cooling_minutes": cool_min.round(0),
                         "fragrance_pct": fragrance.round(2), "humidity_pct": humidity.round(0),
                         "wick_lot": pick(rng, n, 12, 0.5, "lot_")[1], "grade": grade})


@dataset("web-session-conversion", "converted", CLS)
def _web(rng):
    n = 8000
    pages = 1 + rng.negative_binomial(2, 0.25, n)
    secs = rng.lognormal(4.5, 1.0, n)
    device_c, device = pick(rng, n, ["mobile", "desktop", "tablet"], 0.8)
    source_c, source = pick(rng, n, ["search", "email", "social", "direct", "affiliate"], 0.7)
    returning = rng.random(n) < 0.35
    cart = rng.poisson(0.4 * pages / 4, n)
    sig = (0.8 * np.log1p(cart) + 0.3 * np.log(pages) + 0.2 * np.log(secs) + 0.7 * returning
           + effect(rng, source_c, 0.5) - 0.4 * (device_c == 0) * (pages > 10) + 1.0 * (cart > 2))
    y = binary(rng, sig, 1 / 13, strength=3.5)
    cols = {"pages": pages, "session_seconds": secs.round(0), "device": device, "source": source,
            "returning": returning, "cart_adds": cart,
            "search_queries": rng.poisson(1.2, n), "hour": rng.integers(0, 24, n),
            "landing": pick(rng, n, 80, 1.1, "page_")[1],
            "promo_banner_seen": rng.random(n) < 0.4,
            "days_since_last_visit": holes(rng, np.where(returning, rng.exponential(20, n),
                                                         np.nan).round(0), 0.0),
            "wishlist_items": rng.poisson(0.7, n), "video_views": rng.poisson(0.3, n)}
    for i in range(6):
        cols[f"scroll_depth_{i}"] = rng.beta(2, 3, n).round(3)
    cols["converted"] = y
    return pd.DataFrame(cols)


@dataset("coupon-redemption", "redeemed", CLS, (HGB, RF, LIN))
def _coupon(rng):
    n = 5000
    value = rng.choice([5, 10, 15, 20, 25], n).astype(float)
    min_spend = value * rng.choice([3, 4, 5, 6], n)
    past_red = rng.binomial(5, 0.3, n)
    spend = rng.lognormal(4.5, 0.8, n)
    seg_c, segment = pick(rng, n, ["new", "casual", "regular", "devoted"], 0.3)
    sig = (0.08 * value - 0.01 * min_spend + 0.5 * past_red + 0.3 * np.log(spend) * (seg_c > 1)
           + 0.4 * seg_c)
    y = binary(rng, sig, 1 / 7)
    return pd.DataFrame({
        "coupon_value": value, "min_spend": min_spend, "past_redemptions": past_red,
        "spend_12m": holes(rng, spend.round(2), 0.15, by=spend),
        "segment": segment, "channel": pick(rng, n, ["email", "post", "app_push"], 0.4)[1],
        "days_valid": rng.choice([7, 14, 30], n), "opened_email": holes(
            rng, (rng.random(n) < 0.5).astype(float), 0.2),
        "distance_store_km": rng.lognormal(1.5, 0.8, n).round(1),
        "household_size": holes(rng, (1 + rng.poisson(1.4, n)).astype(float), 0.25),
        "region": pick(rng, n, REGIONS, 0.3)[1], "app_user": rng.random(n) < 0.4,
        "category_focus": pick(rng, n, CATEGORIES, 0.4)[1],
        "age_band": pick(rng, n, ["18-29", "30-44", "45-59", "60+"], 0.2)[1], "redeemed": y,
    })


@dataset("stockout-next-week", "stockout", CLS)
def _stockout(rng):
    n = 6500
    on_hand = rng.negative_binomial(3, 0.1, n).astype(float)
    demand = rng.lognormal(2.5, 0.7, n)
    lead = rng.integers(2, 15, n)
    open_po = rng.random(n) < 0.5
    cover = on_hand / demand
    sig = -1.2 * np.log1p(cover) + 0.1 * lead - 1.0 * open_po * (lead < 7) + 0.3 * np.log(demand)
    y = binary(rng, sig, 0.18, strength=3.5)
    cols = {"on_hand": on_hand, "open_po": open_po, "lead_days": lead,
            "category": pick(rng, n, CATEGORIES, 0.5)[1],
            "store": pick(rng, n, 40, 0.3, "store_")[1]}
    for w in range(1, 9):  # weekly sales history: the true demand plus noise
        cols[f"sales_w{w}"] = rng.poisson(demand * rng.lognormal(0, 0.3, n)).astype(float)
    for w in range(1, 5):
        cols[f"forecast_w{w}"] = holes(rng, (demand * rng.lognormal(0, 0.2, n)).round(1), 0.05)
    for i in range(10):
        cols[f"attr_{i}"] = rng.normal(0, 1, n).round(3)
    cols["shelf_capacity"] = (on_hand * rng.uniform(1, 3, n)).round(0)
    cols["promo_planned"] = rng.random(n) < 0.15
    cols["supplier_fill_rate"] = holes(rng, rng.beta(9, 1, n).round(3), 0.1)
    cols["stockout"] = y
    return pd.DataFrame(cols)


@dataset("shelf-life-days", "shelf_life_days", REG, (HGB, RF, KNN))
def _shelf_life(rng):
    n = 900
    temp = rng.uniform(2, 25, n)
    humidity = rng.uniform(20, 80, n)
    pack_c, pack = pick(rng, n, ["sealed", "vented", "wrapped"], 0.3)
    preservative = rng.uniform(0, 1, n)
    life = (120 * np.exp(-0.06 * temp) * (1 + 0.5 * preservative)
            * np.array([1.3, 0.8, 1.0])[pack_c]
            * np.exp(-0.005 * np.maximum(humidity - 50, 0) * temp / 10) * rng.lognormal(0, 0.12, n))
    return pd.DataFrame({"storage_temp_c": temp.round(1), "humidity_pct": humidity.round(0),
                         "packaging": pack, "preservative_index": preservative.round(3),
                         "batch_size": rng.integers(50, 500, n),
                         "line": pick(rng, n, ["l1", "l2", "l3"], 0.2)[1],
                         "ph": holes(rng, rng.normal(5.5, 0.4, n).round(2), 0.05),
                         "fill_weight_g": rng.normal(250, 5, n).round(1),
                         "shelf_life_days": life.round(1)})


@dataset("review-rating", "stars", CLS)
def _review(rng):
    n = 2400
    delay = rng.gamma(1.2, 1.5, n)
    price = rng.lognormal(3.5, 0.8, n)
    damaged = rng.random(n) < 0.06
    cat_c, cat = pick(rng, n, CATEGORIES, 0.5)
    quality = (effect(rng, cat_c, 0.6) - 0.6 * delay - 3.0 * damaged + rng.normal(0, 1.0, n)
               + 0.2 * np.log(price))
    stars = np.digitize(quality, np.quantile(quality, [0.06, 0.12, 0.25, 0.5])) + 1
    return pd.DataFrame({
        "delivery_delay_days": delay.round(1), "price": price.round(2), "arrived_damaged": damaged,
        "category": cat, "member": rng.random(n) < 0.4, "first_purchase": rng.random(n) < 0.3,
        "word_count": holes(rng, rng.negative_binomial(2, 0.05, n).astype(float), 0.1),
        "photos": rng.poisson(0.3, n), "channel": pick(rng, n, CHANNELS[:3], 0.8)[1],
        "assembly_needed": rng.random(n) < 0.2,
        "support_contacts": rng.poisson(0.2 + 0.5 * damaged + 0.2 * delay, n),
        "discount_pct": rng.choice([0, 0, 0, 10, 20], n), "stars": stars,
    })


@dataset("gift-card-balance-left", "balance_left", REG)
def _gift_card(rng):
    n = 1800
    face = rng.choice([10, 20, 25, 50, 100], n).astype(float)
    age_days = rng.exponential(200, n)
    uses = rng.poisson(1 + age_days / 150, n)
    corporate = rng.random(n) < 0.15
    frac = np.clip(np.exp(-0.6 * uses) * (1 + 0.4 * corporate) + rng.normal(0, 0.08, n), 0, 1)
    return pd.DataFrame({
        "face_value": face, "age_days": age_days.round(0), "uses": uses, "corporate": corporate,
        "bought_online": rng.random(n) < 0.4, "reminder_sent": rng.random(n) < 0.3,
        "holder_member": holes(rng, (rng.random(n) < 0.5).astype(float), 0.2),
        "design": pick(rng, n, ["plain", "floral", "seasonal", "kids"], 0.5)[1],
        "balance_left": (face * frac).round(2),
    })


@dataset("van-route-fuel", "fuel_litres", REG, (HGB, RF, LIN))
def _fuel(rng):
    n = 1000
    km = rng.gamma(5, 20, n)
    load = rng.uniform(200, 1500, n)
    stops = rng.poisson(12, n)
    hilly = rng.random(n) < 0.25
    van_c, van = pick(rng, n, ["v-small", "v-mid", "v-large"], 0.3)
    fuel = (km * (0.07 + 0.02 * van_c) * (1 + 0.0002 * load) * (1 + 0.15 * hilly) + 0.2 * stops
            + rng.normal(0, 1.0, n))
    return pd.DataFrame({
        "route_km": km.round(1), "load_kg": load.round(0), "stops": stops, "hilly": hilly,
        "van_class": van, "outside_temp_c": rng.normal(12, 7, n).round(1),
        "driver_band": pick(rng, n, ["a", "b", "c"], 0.2)[1],
        "tyre_pressure_ok": rng.random(n) < 0.9, "urban_share": rng.beta(2, 2, n).round(2),
        "idle_minutes": holes(rng, rng.gamma(2, 10, n).round(0), 0.1),
        "weekday": rng.integers(0, 7, n), "fuel_litres": fuel.round(2),
    })


@dataset("catalogue-response", "responded", CLS, (HGB, RF, LIN, KNN))
def _catalogue(rng):
    n = 400
    recency = rng.exponential(120, n)
    frequency = rng.poisson(4, n)
    monetary = rng.lognormal(4, 0.7, n)
    sig = -0.008 * recency + 0.25 * frequency + 0.4 * np.log(monetary)
    y = binary(rng, sig, 0.5, strength=1.5)
    return pd.DataFrame({"recency_days": recency.round(0), "orders_24m": frequency,
                         "spend_24m": monetary.round(2),
                         "catalogue_edition": pick(rng, n, ["spring", "autumn", "winter"], 0.1)[1],
                         "prior_responses": rng.binomial(3, 0.3, n), "responded": y})


@dataset("assembly-service-booking", "booked_assembly", CLS)
def _assembly(rng):
    n = 2000
    pieces = rng.poisson(25, n)
    price = rng.lognormal(5, 0.6, n)
    age = rng.uniform(18, 85, n)
    flat = rng.random(n) < 0.5
    cat_c, cat = pick(rng, n, ["wardrobe", "bed", "desk", "shelving", "table"], 0.5)
    sig = 0.03 * pieces + 0.03 * (age - 50) * (pieces > 25) + 0.5 * np.log(price) + 0.6 * flat \
        + effect(rng, cat_c, 0.6)
    y = binary(rng, sig, 1 / 11)
    cols = {"pieces": pieces, "price": price.round(2),
            "customer_age": holes(rng, age.round(0), 0.12),
            "flat_dwelling": flat, "category": cat, "has_car": rng.random(n) < 0.7,
            "delivery_booked": rng.random(n) < 0.6, "member": rng.random(n) < 0.4,
            "tool_kit_bought": rng.random(n) < 0.15, "store": pick(rng, n, 30, 0.4, "store_")[1],
            "weight_kg": (pieces * rng.lognormal(0.5, 0.3, n)).round(1),
            "previous_bookings": rng.poisson(0.2, n), "online": rng.random(n) < 0.5,
            "floor_level": holes(rng, rng.integers(0, 12, n).astype(float), 0.2),
            "lift_in_building": rng.random(n) < 0.5, "weekend_slot": rng.random(n) < 0.4}
    cols["booked_assembly"] = y
    return pd.DataFrame(cols)


@dataset("price-sensitivity-segment", "segment", CLS, (HGB, RF, LIN))
def _segment(rng):
    n = 1600
    disc_share = rng.beta(2, 5, n)
    premium_share = rng.beta(2, 4, n)
    visits = rng.poisson(6, n)
    scores = np.column_stack([4 * disc_share, 3 * premium_share + 0.05 * visits,
                              np.full(n, 1.2)])
    seg = multiclass(rng, scores, ["bargain", "premium", "mainstream"], 0.7)
    cols = {"discount_share": disc_share.round(3), "premium_share": premium_share.round(3),
            "visits_12m": visits}
    for i in range(21):  # survey answers on a 1..7 scale, most unrelated to the segment
        base = (disc_share if i < 3 else premium_share if i < 5 else rng.random(n))
        cols[f"survey_q{i + 1}"] = np.clip(np.round(1 + 6 * base + rng.normal(0, 1.2, n)), 1, 7)
    cols["segment"] = seg
    return pd.DataFrame(cols)


@dataset("parcel-weight-estimate", "weight_kg", REG, (HGB, RF, LIN))
def _parcel(rng):
    n = 3000
    vol = rng.lognormal(2.5, 0.7, n)
    items = 1 + rng.poisson(2, n)
    dense = rng.random(n) < 0.3
    w = 0.12 * vol + 0.4 * items + 1.5 * dense + rng.normal(0, 0.6, n)
    return pd.DataFrame({"volume_l": vol.round(2), "items": items, "dense_goods": dense,
                         "box_size": pick(rng, n, ["s", "m", "l", "xl"], 0.3)[1],
                         "weight_kg": w.round(2)})


@dataset("loyalty-points-spend", "points_spent", REG)
def _points(rng):
    n = 2600
    balance = rng.lognormal(6, 1.0, n)
    tenure = rng.gamma(2, 18, n)
    tier_c, tier = pick(rng, n, ["bronze", "silver", "gold", "ember"], 0.8)
    reminders = rng.poisson(2, n)
    spent = (balance * (0.1 + 0.05 * tier_c + 0.04 * reminders * (tier_c > 1))
             * rng.lognormal(0, 0.4, n) * (rng.random(n) < 0.8))
    cols = {"points_balance": holes(rng, balance.round(0), 0.1, by=balance),
            "tenure_months": tenure.round(1),
            "tier": tier, "reminders": reminders, "app_user": rng.random(n) < 0.5,
            "last_redeem_days": holes(rng, rng.exponential(100, n).round(0), 0.25, by=-tenure)}
    for i in range(12):
        cols[f"spend_{CATEGORIES[i % 10]}_{i // 10}"] = holes(
            rng, rng.lognormal(2 + 0.3 * tier_c, 1.0, n).round(2), 0.2)
    cols["points_spent"] = spent.round(0)
    return pd.DataFrame(cols)


@dataset("inbound-pallet-count", "pallets", REG, (HGB, RF, LIN))
def _pallets(rng):
    n = 200
    order_value = rng.lognormal(9, 0.6, n)
    lines = rng.poisson(20, n) + 1
    bulky_share = rng.beta(2, 5, n)
    pallets = order_value / 2000 * (1 + 2 * bulky_share) + 0.05 * lines + rng.normal(0, 1.0, n)
    return pd.DataFrame({"order_value": order_value.round(0), "order_lines": lines,
                         "bulky_share": bulky_share.round(3),
                         "supplier_tier": pick(rng, n, ["t1", "t2", "t3"], 0.3)[1],
                         "pallets": np.maximum(pallets, 0.5).round(2)})


@dataset("customer-query-topic", "topic", CLS)
def _query_topic(rng):
    n = 3000
    topics = ["delivery", "refund", "product", "account", "store", "damage"]
    t = rng.choice(6, n, p=[0.3, 0.2, 0.2, 0.1, 0.1, 0.1])
    cols = {}
    # keyword counts: each keyword is more frequent under one or two topics
    favoured = rng.integers(0, 6, 36)
    for j in range(36):
        rate = 0.15 + 1.2 * (t == favoured[j]) + 0.4 * (t == (favoured[j] + 1) % 6) * (j % 3 == 0)
        cols[f"kw_{j:02d}"] = rng.poisson(rate)
    cols["message_words"] = rng.negative_binomial(3, 0.05, n)
    cols["channel"] = pick(rng, n, ["email", "chat", "form"], 0.5)[1]
    cols["has_order_ref"] = rng.random(n) < np.where(np.isin(t, [0, 1, 5]), 0.8, 0.3)
    cols["hour"] = rng.integers(0, 24, n)
    obs = np.asarray(topics, dtype=object)[t]
    flip = rng.random(n) < 0.12  # mislabelled by the triage team
    obs[flip] = np.asarray(topics, dtype=object)[rng.integers(0, 6, flip.sum())]
    cols["topic"] = obs
    return pd.DataFrame(cols)


@dataset("outdoor-furniture-demand", "units", REG, (HGB, RF, KNN))
def _outdoor(rng):
    n = 1400
    temp = rng.normal(16, 7, n)
    sun_hours = np.clip(rng.normal(6, 3, n), 0, 14)
    week = rng.integers(1, 53, n)
    price_idx = rng.normal(1.0, 0.1, n)
    mu = np.exp(1.5 + 0.08 * np.maximum(temp - 10, 0) + 0.1 * sun_hours * (temp > 15)
                + 0.8 * np.exp(-((week - 24) / 8.0) ** 2) - 1.5 * (price_idx - 1))
    return pd.DataFrame({"temperature_c": temp.round(1), "sun_hours": sun_hours.round(1),
                         "week_of_year": week, "price_index": price_idx.round(3),
                         "garden_centre": rng.random(n) < 0.3,
                         "units": rng.poisson(mu).astype(float) + rng.uniform(0, 0.5, n).round(2)})


@dataset("bedding-size-mix", "size", CLS, (HGB, RF, KNN))
def _bedding(rng):
    n = 2000
    bedrooms = rng.integers(1, 6, n)
    age = rng.uniform(18, 80, n)
    household = 1 + rng.poisson(1.2, n)
    scores = np.column_stack([-0.5 * household + 0.02 * (age - 50) - 0.3 * bedrooms,
                              0.3 * household * (age < 40), 0.2 * household + 0.2 * bedrooms,
                              0.3 * bedrooms * (age > 45)])
    size = multiclass(rng, scores * 1.5, ["single", "double", "king", "superking"], 1.0)
    return pd.DataFrame({"bedrooms": bedrooms, "customer_age": holes(rng, age.round(0), 0.1),
                         "household_size": household, "region": pick(rng, n, REGIONS, 0.3)[1],
                         "member": rng.random(n) < 0.4,
                         "past_bedding_orders": rng.poisson(0.8, n), "size": size})


# -- running studies ------------------------------------------------------------------------
def affordable_space(family: str, task: str) -> SearchSpace:
    """The family's declared space narrowed to the affordable settings above."""
    return SearchSpace.from_dict(AFFORDABLE[family], get_family(family).space(task))


def sample_configs(name: str, family: str, task: str, n: int = N_TRIALS) -> list[dict]:
    rng = np.random.default_rng(seed_for("configs", name, family))
    space = affordable_space(family, task)
    return [space.sample(rng) for _ in range(n)]


def run_trials(df: pd.DataFrame, target: str, task: str, family: str,
               configs: list[dict], seed: int) -> list[dict]:
    """Cross-validate every configuration; one trial record per configuration.

    Scores are the mean over ``N_FOLDS`` shuffled folds of the task's default metric;
    ``fit_seconds`` is the mean fit time per fold; a configuration that raises is
    recorded as failed with its one-line error.
    """
    fam = get_family(family)
    X, y = df.drop(columns=[target]), df[target]
    splitter = (StratifiedKFold if task == CLS else KFold)(N_FOLDS, shuffle=True,
                                                           random_state=seed)
    out = []
    with threadpool_limits(1):  # one core: threads only fight on a shared machine
        for config in configs:
            out.append(_one_trial(make_pipeline(fam, task, config, X, seed=seed), X, y,
                                  splitter, task, config))
    return out


def _one_trial(pipe, X, y, splitter, task: str, config: dict) -> dict:
    """Cross-validate one pipeline; a trial record (failed with its error if it raises)."""
    try:
        res = cross_validate(pipe, X, y, cv=splitter, scoring=DEFAULT_METRIC[task],
                             error_score="raise")
        return {**config, "score": float(np.mean(res["test_score"])),
                "fit_seconds": float(np.mean(res["fit_time"])), "status": "ok"}
    except Exception as exc:  # noqa: BLE001 - a failed trial is data, not a crash
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        if os.environ.get("WARMSTART_DEMO_DEBUG"):
            traceback.print_exc()
        return {**config, "score": None, "status": "failed",
                "error": f"{type(exc).__name__}: {msg}"[:300]}


def run_study(spec: DemoDataset, family: str, df: pd.DataFrame | None = None) -> list[dict]:
    """The trials of one demo study, exactly as the generator logs them."""
    df = spec.frame() if df is None else df
    configs = sample_configs(spec.name, family, spec.task)
    return run_trials(df, spec.target, spec.task, family, configs,
                      seed=seed_for("cv", spec.name, family))


def demo_fingerprint(spec: DemoDataset, df: pd.DataFrame | None = None) -> Fingerprint:
    return fingerprint(spec.frame() if df is None else df, target=spec.target, task=spec.task)


def build_history(out: Path, only: list[str] | None = None, quiet: bool = False) -> dict:
    """Build the history into a temporary directory next to ``out``, then replace ``out``.

    Returns timing and size figures.
    """
    names = list(DATASETS) if not only else only
    unknown = [nm for nm in names if nm not in DATASETS]
    if unknown:
        raise SystemExit(f"error: unknown dataset(s) {', '.join(unknown)}; "
                         f"known: {', '.join(DATASETS)}")
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix=".demo-history-", dir=out.parent))
    start, cpu_start = time.perf_counter(), time.process_time()
    try:
        kb = KnowledgeBase.init(work / "kb")
        if only and (out / "warmstart-history.json").is_file():
            _copy_other_studies(KnowledgeBase(out), kb, {LABEL_PREFIX + nm for nm in names})
        for nm in names:
            spec = DATASETS[nm]
            t0, c0 = time.perf_counter(), time.process_time()
            df = spec.frame()
            fp = demo_fingerprint(spec, df)
            for family in spec.families:
                trials = run_study(spec, family, df)
                kb.log(fingerprint_of=fp, family=family, trials=trials,
                       name=LABEL_PREFIX + nm)
            if not quiet:
                print(f"{nm:28s} {spec.task:14s} {df.shape[0]:5d} x {df.shape[1] - 1:2d} "
                      f"{'+'.join(f[:3] for f in spec.families):12s} "
                      f"{time.perf_counter() - t0:6.1f} s wall "
                      f"{time.process_time() - c0:6.1f} s cpu", flush=True)
        if out.exists():
            shutil.rmtree(out)
        (work / "kb").rename(out)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return {"seconds": time.perf_counter() - start, "datasets": len(names),
            "cpu_seconds": time.process_time() - cpu_start}


def _copy_other_studies(old: KnowledgeBase, new: KnowledgeBase, rebuilt: set[str]) -> None:
    """Copy every study of ``old`` not labelled in ``rebuilt`` (with its trials and
    dataset row) into ``new``, file by file: the files are named by study id."""
    t = old.tables()
    keep = t["studies"][~t["studies"]["label"].isin(rebuilt)]
    keep_ids, keep_datasets = set(keep["study_id"]), set(keep["dataset_id"])
    for table in ("studies", "trials"):
        for sid in keep_ids:
            shutil.copy2(old.path / table / f"{sid}.parquet", new.path / table)
    for path in (old.path / "datasets").glob("*.parquet"):
        rows = pd.read_parquet(path, columns=["dataset_id"])
        if set(rows["dataset_id"]) & keep_datasets:
            shutil.copy2(path, new.path / "datasets")


# -- the example dataset (not in the history) ----------------------------------------------
EXAMPLE_TARGET = "churned"


def example_churn(seed: int = seed_for("example", "loyalty-churn")) -> pd.DataFrame:
    """A loyalty-member churn table in the spirit of ``loyalty-lapse``, drawn afresh:
    other columns, another churn rate, more missing values."""
    rng = np.random.default_rng(seed)
    n = 4000
    tenure = rng.gamma(2.2, 12.0, n)
    visits = rng.poisson(np.exp(1.3 - tenure / 150), n)
    spend = rng.lognormal(4.2, 1.0, n)
    days_since = rng.exponential(50, n)
    tier_c, tier = pick(rng, n, ["bronze", "silver", "gold", "ember"], 0.9)
    ch_c, channel = pick(rng, n, CHANNELS, 0.6)
    store_c, store = pick(rng, n, 45, 0.7, "store_")
    complaints = rng.poisson(0.35, n)
    points = rng.lognormal(5.5, 1.1, n)
    sig = (0.025 * days_since - 0.45 * np.log1p(visits) - 0.25 * np.log(spend) - 0.35 * tier_c
           + 0.6 * complaints * (tier_c >= 1) + effect(rng, ch_c, 0.4)
           + effect(rng, store_c, 0.3) - 0.15 * np.log(points) * (ch_c == 2))
    y = binary(rng, sig, 0.16, strength=2.5)
    return pd.DataFrame({
        "member_id": np.arange(100001, 100001 + n),
        "tenure_months": tenure.round(1), "visits_90d": visits,
        "spend_12m": holes(rng, spend.round(2), 0.1, by=-spend),
        "days_since_purchase": days_since.round(0), "tier": tier, "channel": channel,
        "home_store": store, "complaints_12m": complaints,
        "points_balance": holes(rng, points.round(0), 0.12),
        "email_opt_in": rng.random(n) < 0.55,
        "newsletter_clicks_90d": holes(rng, rng.poisson(1.5, n).astype(float), 0.2),
        "returns_12m": rng.poisson(0.45, n),
        "household_size": holes(rng, (1 + rng.poisson(1.3, n)).astype(float), 0.18),
        "region": pick(rng, n, REGIONS, 0.4)[1], EXAMPLE_TARGET: y,
    })


EXAMPLE_CONFIGS = [
    {"learning_rate": 0.1, "max_iter": 100, "max_leaf_nodes": 31, "min_samples_leaf": 20},
    {"learning_rate": 0.05, "max_iter": 200, "max_leaf_nodes": 15, "min_samples_leaf": 40,
     "l2_regularization": 1.0},
    {"learning_rate": 0.2, "max_iter": 60, "max_leaf_nodes": 63, "max_depth": 8},
    {"learning_rate": 0.03, "max_iter": 300, "max_leaf_nodes": 8, "max_features": 0.5},
]


def write_examples(directory: Path = EXAMPLES) -> None:
    """Write the example dataset and a trials file of real runs on it (plus one trial
    the analyst stopped, to show how a failed trial is recorded)."""
    df = example_churn()
    df.to_csv(directory / "quillmarsh_loyalty_churn.csv", index=False)
    rows = run_trials(df, EXAMPLE_TARGET, CLS, HGB, EXAMPLE_CONFIGS,
                      seed=seed_for("cv", "example"))
    rows.append({"learning_rate": 0.005, "max_iter": 1000, "max_leaf_nodes": 256,
                 "min_samples_leaf": 1, "score": None, "status": "failed",
                 "error": "stopped by the analyst: over the 10-minute budget"})
    trials = pd.DataFrame(rows)
    trials["fit_seconds"] = trials["fit_seconds"].round(3)
    trials.to_csv(directory / "quillmarsh_loyalty_churn_trials.csv", index=False)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=ROOT / "knowledge_base",
                        help="history directory to (re)build [default: knowledge_base]")
    parser.add_argument("--only", action="append", metavar="DATASET",
                        help="rebuild only this dataset (repeatable); keep the other studies")
    parser.add_argument("--no-examples", action="store_true",
                        help="do not rewrite the example CSV files")
    args = parser.parse_args(argv)
    result = build_history(args.out, args.only)
    if not args.no_examples:
        write_examples()
    print(f"built {args.out} ({result['datasets']} datasets) in {result['seconds']:.0f} s "
          f"({result['cpu_seconds']:.0f} s of CPU)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
