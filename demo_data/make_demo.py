"""Generate glassbox's invented demo data: loan applications and cottage listings.

Everything here is made up for demonstration. The outcomes are drawn from
"true" models whose shape functions are the named functions below (additive, but for one
pair term in the listings: price matters differently near the coast), so a fitted
glass-box model can be compared against a known truth.

Run ``python demo_data/make_demo.py`` to rewrite the CSV and schema files next
to this script. The same seed always gives byte-identical files.
"""

from __future__ import annotations

import argparse
import importlib.util
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

DEFAULT_SEED = 20261201
DEFAULT_ROWS_LOANS = 5000
DEFAULT_ROWS_LISTINGS = 3000
BIG_ROWS = 20000

# ---------------------------------------------------------------------------
# Scenario A: Fenmoor Community Lending (invented), small-business loans.
# The true score is the log-odds of default; each term below is one shape.
# ---------------------------------------------------------------------------

LOAN_INTERCEPT = -4.3

SECTORS = (
    "retail",
    "hospitality",
    "construction",
    "manufacturing",
    "professional services",
    "agriculture",
    "transport",
)
SECTOR_SHARES = (0.22, 0.16, 0.15, 0.12, 0.17, 0.08, 0.10)
SECTOR_OFFSETS = {
    "retail": 0.0,
    "hospitality": 0.6,
    "construction": 0.5,
    "manufacturing": -0.15,
    "professional services": -0.5,
    "agriculture": 0.25,
    "transport": 0.3,
    "care services": 0.2,  # NEW_SECTOR: applications only from the second quarter on
}
PREMISES_OWNED_OFFSET = -0.6
# Some applicants leave revenue blank, more often the riskier ones: the chance is
# REVENUE_GAP_BASE + REVENUE_GAP_RISK x (their default probability with revenue stated).
# A blank revenue then scores REVENUE_NOT_STATED_EFFECT in the truth, in place of the curve.
REVENUE_GAP_BASE = 0.04
REVENUE_GAP_RISK = 0.30
REVENUE_NOT_STATED_EFFECT = 0.4

AGE_BANDS = ("18-29", "30-44", "45-59", "60+")
AGE_SHARES = (0.15, 0.36, 0.31, 0.18)
AGE_MEAN_YEARS = (3.0, 7.5, 13.0, 17.0)
AGE_MAX_YEARS = (11, 26, 40, 40)


def late_payments_effect(late: np.ndarray) -> np.ndarray:
    """Threshold: +0.3 for one late payment, a jump to +2.0 at two or more."""
    late = np.asarray(late, dtype=float)
    return 0.3 * (late >= 1) + 1.7 * (late >= 2)


def years_trading_effect(years: np.ndarray) -> np.ndarray:
    """Plateau: risk falls linearly from +2.0 at 0 years to 0 at 5 years, then flat."""
    years = np.asarray(years, dtype=float)
    return 2.0 * np.clip(5.0 - years, 0.0, 5.0) / 5.0


def credit_utilisation_effect(util: np.ndarray) -> np.ndarray:
    """U-shape with its minimum at 0.3; the low side is steeper than the high side."""
    util = np.asarray(util, dtype=float)
    low = 16.0 * np.clip(0.3 - util, 0.0, None) ** 2
    high = 7.0 * np.clip(util - 0.3, 0.0, None) ** 2
    return low + high


def debt_to_revenue_effect(ratio: np.ndarray) -> np.ndarray:
    """Smooth, increasing, concave: 2.4 * log(1 + ratio)."""
    return 2.4 * np.log1p(np.asarray(ratio, dtype=float))


def annual_revenue_effect(revenue: np.ndarray) -> np.ndarray:
    """Smooth, decreasing: -0.9 * log(revenue / 250), revenue in thousands; an application
    that does not state its revenue (blank) gets REVENUE_NOT_STATED_EFFECT instead."""
    revenue = np.asarray(revenue, dtype=float)
    stated = ~np.isnan(revenue)
    effect = np.full(revenue.shape, REVENUE_NOT_STATED_EFFECT)
    effect[stated] = -0.9 * np.log(revenue[stated] / 250.0)
    return effect


def amount_requested_effect(amount: np.ndarray) -> np.ndarray:
    """Smooth, increasing: 0.5 * log(amount / 50), amount in thousands.

    Together with the revenue term this carries the "amount relative to
    revenue" effect: 0.5 * log(amount / revenue) is additive in the logs.
    """
    return 0.5 * np.log(np.asarray(amount, dtype=float) / 50.0)


def sector_effect(sector: np.ndarray) -> np.ndarray:
    """Lookup of SECTOR_OFFSETS (retail is the reference level)."""
    return np.array([SECTOR_OFFSETS[s] for s in sector], dtype=float)


def premises_owned_effect(owned: np.ndarray) -> np.ndarray:
    """Owning the premises lowers risk by PREMISES_OWNED_OFFSET."""
    return PREMISES_OWNED_OFFSET * (np.asarray(owned) == "yes")


def loan_true_score(frame: pd.DataFrame) -> np.ndarray:
    """True log-odds of default. owner_age_band has no term: it has no effect."""
    return (
        LOAN_INTERCEPT
        + annual_revenue_effect(frame["annual_revenue"])
        + years_trading_effect(frame["years_trading"])
        + debt_to_revenue_effect(frame["debt_to_revenue"])
        + credit_utilisation_effect(frame["credit_utilisation"])
        + late_payments_effect(frame["late_payments_24m"])
        + amount_requested_effect(frame["amount_requested"])
        + sector_effect(frame["sector"].to_numpy())
        + premises_owned_effect(frame["premises_owned"].to_numpy())
    )


# ---------------------------------------------------------------------------
# Later quarters of scenario A, for monitoring. loans.csv is the development sample (the
# first quarter). From the second quarter the lender also lends to a new sector; a downturn
# cuts every business's revenue to DOWNTURN_REVENUE_FACTOR of what it would have been (a
# population shift). In the third quarter the downturn persists and a data-feed fault
# records every late-payment count as 0 (the true counts still drive the outcomes), and
# its outcomes have not arrived yet.
# ---------------------------------------------------------------------------

QUARTER_ROWS = 2500
DOWNTURN_REVENUE_FACTOR = 0.7
NEW_SECTOR = "care services"
NEW_SECTOR_SHARE = 0.01


@dataclass(frozen=True)
class Quarter:
    """One quarter of later applications and what happened in it."""

    label: str
    file: str
    first_day: str  # ISO date
    days: int
    revenue_factor: float
    late_feed_fault: bool
    outcomes_known: bool


QUARTERS = (
    Quarter("2026-Q2", "loans_q2.csv", "2026-04-01", 91, DOWNTURN_REVENUE_FACTOR,
            late_feed_fault=False, outcomes_known=True),
    Quarter("2026-Q3", "loans_q3.csv", "2026-07-01", 92, DOWNTURN_REVENUE_FACTOR,
            late_feed_fault=True, outcomes_known=False),
)
QUARTERS_FILE = "loans_quarters.csv"


# ---------------------------------------------------------------------------
# Scenario B: Saltmarsh Stays (invented), holiday-cottage marketplace.
# The true score is the log-odds of a listing being rated top tier.
# ---------------------------------------------------------------------------

LISTING_INTERCEPT = -3.45

REGIONS = (
    "Brackenshore",
    "Gullhaven",
    "Reedmere",
    "Cinderwick",
    "Tansy Head",
    "Pellow Sands",
)
REGION_SHARES = (0.24, 0.20, 0.18, 0.15, 0.13, 0.10)
REGION_MEDIAN_PRICE = (130.0, 165.0, 105.0, 120.0, 190.0, 145.0)
REGION_OFFSETS = {
    "Brackenshore": 0.0,
    "Gullhaven": 0.45,
    "Reedmere": -0.35,
    "Cinderwick": -0.15,
    "Tansy Head": 0.6,
    "Pellow Sands": 0.2,
}
PETS_ALLOWED_OFFSET = 0.4
MISSING_RESPONSE_HOURS = 24.0  # new hosts have no record; the truth treats them as 24 hours
COAST_PRICE_WEIGHT = 4.0  # the price x distance-to-coast interaction (coast_price_effect)
COAST_PRICE_KM = 3.0
COAST_PRICE_CENTRE = 0.3


def reviews_count_effect(reviews: np.ndarray) -> np.ndarray:
    """Diminishing returns: 0.7 * log(1 + reviews)."""
    return 0.7 * np.log1p(np.asarray(reviews, dtype=float))


def host_response_hours_effect(hours: np.ndarray) -> np.ndarray:
    """Decreasing: -0.8 * log(1 + hours); a missing value counts as 24 hours."""
    hours = np.asarray(hours, dtype=float)
    hours = np.where(np.isnan(hours), MISSING_RESPONSE_HOURS, hours)
    return -0.8 * np.log1p(hours)


def cleanliness_score_effect(score: np.ndarray) -> np.ndarray:
    """Increasing with a kink: 1.2 * (score - 4) plus 1.6 * (score - 4.5) above 4.5."""
    score = np.asarray(score, dtype=float)
    return 1.2 * (score - 4.0) + 1.6 * np.clip(score - 4.5, 0.0, None)


def photos_effect(photos: np.ndarray) -> np.ndarray:
    """Diminishing returns that saturate: 2.4 * (1 - exp(-photos / 8))."""
    return 2.4 * (1.0 - np.exp(-np.asarray(photos, dtype=float) / 8.0))


def nightly_price_effect(price: np.ndarray) -> np.ndarray:
    """Sweet spot: -1.8 * log(price / 140) ** 2, best at 140 per night."""
    return -1.8 * np.log(np.asarray(price, dtype=float) / 140.0) ** 2


def distance_to_coast_effect(km: np.ndarray) -> np.ndarray:
    """Decreasing, then flat: -1.6 * (1 - exp(-km / 5))."""
    return -1.6 * (1.0 - np.exp(-np.asarray(km, dtype=float) / 5.0))


def coast_price_effect(price: np.ndarray, km: np.ndarray) -> np.ndarray:
    """The one interaction: near the coast guests pay for the sea, so a higher price is
    better there and worse inland. COAST_PRICE_WEIGHT * log(price / 140) *
    (exp(-km / COAST_PRICE_KM) - COAST_PRICE_CENTRE); the centre is about the mean of
    exp(-km / 3) over the listings, so on average the price curve stays the sweet spot."""
    closeness = np.exp(-np.asarray(km, dtype=float) / COAST_PRICE_KM)
    return (COAST_PRICE_WEIGHT * np.log(np.asarray(price, dtype=float) / 140.0)
            * (closeness - COAST_PRICE_CENTRE))


def region_effect(region: np.ndarray) -> np.ndarray:
    """Lookup of REGION_OFFSETS (Brackenshore is the reference level)."""
    return np.array([REGION_OFFSETS[r] for r in region], dtype=float)


def pets_allowed_effect(pets: np.ndarray) -> np.ndarray:
    """Allowing pets adds PETS_ALLOWED_OFFSET."""
    return PETS_ALLOWED_OFFSET * (np.asarray(pets) == "yes")


def listing_true_score(frame: pd.DataFrame) -> np.ndarray:
    """True log-odds of a listing being top tier: additive but for one pair term,
    coast_price_effect (price matters differently near the coast)."""
    return (
        LISTING_INTERCEPT
        + reviews_count_effect(frame["reviews_count"])
        + host_response_hours_effect(frame["host_response_hours"])
        + cleanliness_score_effect(frame["cleanliness_score"])
        + photos_effect(frame["photos"])
        + nightly_price_effect(frame["nightly_price"])
        + distance_to_coast_effect(frame["distance_to_coast_km"])
        + region_effect(frame["region"].to_numpy())
        + pets_allowed_effect(frame["pets_allowed"].to_numpy())
        + coast_price_effect(frame["nightly_price"], frame["distance_to_coast_km"])
    )


# ---------------------------------------------------------------------------
# Big variant of scenario A: 11 extra features, five with small effects.
# ---------------------------------------------------------------------------

LOAN_PURPOSES = ("equipment", "working capital", "premises", "refinance", "expansion")
LOAN_PURPOSE_SHARES = (0.25, 0.35, 0.12, 0.13, 0.15)
LOAN_PURPOSE_OFFSETS = {
    "equipment": 0.0,
    "working capital": 0.1,
    "premises": -0.1,
    "refinance": 0.2,
    "expansion": 0.0,
}
BRANCH_AREAS = ("north", "south", "east", "west", "central")


def staff_count_effect(staff: np.ndarray) -> np.ndarray:
    """Small, decreasing: -0.12 * log(1 + staff)."""
    return -0.12 * np.log1p(np.asarray(staff, dtype=float))


def card_sales_share_effect(share: np.ndarray) -> np.ndarray:
    """Small, decreasing: -0.4 * share."""
    return -0.4 * np.asarray(share, dtype=float)


def invoice_days_effect(days: np.ndarray) -> np.ndarray:
    """Small, increasing: 0.006 * days."""
    return 0.006 * np.asarray(days, dtype=float)


def tax_filings_late_effect(late: np.ndarray) -> np.ndarray:
    """Small, increasing: 0.15 per late filing."""
    return 0.15 * np.asarray(late, dtype=float)


def loan_purpose_effect(purpose: np.ndarray) -> np.ndarray:
    """Lookup of LOAN_PURPOSE_OFFSETS (equipment is the reference level)."""
    return np.array([LOAN_PURPOSE_OFFSETS[p] for p in purpose], dtype=float)


def big_extra_score(frame: pd.DataFrame) -> np.ndarray:
    """Extra log-odds of the big file; the other six extra columns are pure noise."""
    return (
        staff_count_effect(frame["staff_count"])
        + card_sales_share_effect(frame["card_sales_share"])
        + invoice_days_effect(frame["invoice_days"])
        + tax_filings_late_effect(frame["tax_filings_late"])
        + loan_purpose_effect(frame["loan_purpose"].to_numpy())
    )


# ---------------------------------------------------------------------------
# Generators
# ---------------------------------------------------------------------------


def sigmoid(score: np.ndarray) -> np.ndarray:
    """Logistic function."""
    return 1.0 / (1.0 + np.exp(-np.asarray(score, dtype=float)))


def _yes_no(flag: np.ndarray) -> np.ndarray:
    """Map a boolean array to "yes"/"no" strings."""
    return np.where(flag, "yes", "no")


def _choice(
    rng: np.random.Generator, levels: Sequence[str], shares: Sequence[float], n: int
) -> np.ndarray:
    """Draw n category levels with the given shares (normalised)."""
    p = np.asarray(shares, dtype=float)
    return np.asarray(levels, dtype=object)[rng.choice(len(levels), size=n, p=p / p.sum())]


def loan_features(rng: np.random.Generator, n: int, revenue_factor: float = 1.0
                  ) -> pd.DataFrame:
    """Draw the nine loan-application features (no outcome yet). A revenue_factor below 1
    is a downturn: every business's revenue is that share of what it would have been, so
    the amount asked for falls with it and existing debt weighs more against revenue."""
    age_idx = rng.choice(len(AGE_BANDS), size=n, p=np.asarray(AGE_SHARES))
    mean_years = np.asarray(AGE_MEAN_YEARS)[age_idx]
    years = np.rint(rng.gamma(2.0, mean_years / 2.0))
    years = np.minimum(np.clip(years, 0, 40), np.asarray(AGE_MAX_YEARS)[age_idx]).astype(int)

    log_revenue = np.log(200.0) + 0.04 * np.minimum(years, 20) + 0.85 * rng.standard_normal(n)
    log_revenue = log_revenue + np.log(revenue_factor)  # adds exactly 0.0 at the default
    revenue = np.round(np.clip(np.exp(log_revenue), 40.0, 5000.0), 1)

    debt = np.round(np.clip(rng.gamma(2.0, 0.3, size=n) / revenue_factor, 0.0, 3.0), 3)
    util = np.round(rng.beta(1.5, 2.4, size=n), 3)
    late_p = 0.62 - 0.3 * util
    late = np.clip(rng.negative_binomial(0.6, late_p), 0, 12).astype(int)

    ratio = np.exp(np.log(0.2) + 0.6 * rng.standard_normal(n))
    amount = np.clip(np.rint(revenue * ratio), 5, 500).astype(int)

    sector = _choice(rng, SECTORS, SECTOR_SHARES, n)
    owned = rng.random(n) < 0.12 + 0.5 * np.minimum(years, 25) / 25.0

    return pd.DataFrame(
        {
            "annual_revenue": revenue,
            "years_trading": years,
            "debt_to_revenue": debt,
            "credit_utilisation": util,
            "late_payments_24m": late,
            "amount_requested": amount,
            "sector": sector,
            "premises_owned": _yes_no(owned),
            "owner_age_band": np.asarray(AGE_BANDS, dtype=object)[age_idx],
        }
    )


def make_loans(rng: np.random.Generator, n: int) -> pd.DataFrame:
    """Scenario A: loan applications with a drawn `defaulted` outcome; some leave their
    revenue blank, more often the riskier ones (the chance rises with the risk)."""
    frame = loan_features(rng, n)
    frame["defaulted"] = gaps_and_outcomes(rng, frame)
    frame.insert(0, "application_id", [f"L{i:06d}" for i in range(1, n + 1)])
    return frame


def gaps_and_outcomes(rng: np.random.Generator, frame: pd.DataFrame) -> np.ndarray:
    """Blank the revenue of some applications (in place), more often the riskier ones, and
    return the drawn `defaulted` outcomes (yes/no) from the true score."""
    n = len(frame)
    draw = rng.random(n)
    gap_chance = REVENUE_GAP_BASE + REVENUE_GAP_RISK * sigmoid(loan_true_score(frame))
    frame["annual_revenue"] = frame["annual_revenue"].where(rng.random(n) >= gap_chance)
    return _yes_no(draw < sigmoid(loan_true_score(frame)))


def make_loans_big(rng: np.random.Generator, n: int) -> pd.DataFrame:
    """Scenario A with 11 extra features (five small effects, six pure noise)."""
    frame = loan_features(rng, n)
    staff = np.clip(rng.negative_binomial(1.5, 0.15, size=n) + 1, 1, 250).astype(int)
    extra = {
        "staff_count": staff,
        "card_sales_share": np.round(rng.beta(2.0, 2.5, size=n), 3),
        "invoice_days": np.round(np.clip(rng.gamma(3.0, 12.0, size=n), 0.0, 180.0), 1),
        "online_reviews": rng.negative_binomial(1.0, 0.04, size=n).astype(int),
        "branch_distance_km": np.round(rng.exponential(12.0, size=n), 2),
        "seasonality_index": np.round(rng.uniform(0.0, 1.0, size=n), 3),
        "tax_filings_late": np.clip(rng.poisson(0.5, size=n), 0, 5).astype(int),
        "director_count": np.clip(rng.poisson(1.0, size=n) + 1, 1, 8).astype(int),
        "account_tenure_months": rng.integers(0, 241, size=n),
        "loan_purpose": _choice(rng, LOAN_PURPOSES, LOAN_PURPOSE_SHARES, n),
        "branch_area": _choice(rng, BRANCH_AREAS, (1, 1, 1, 1, 1), n),
    }
    for name, values in extra.items():
        frame[name] = values
    p = sigmoid(loan_true_score(frame) + big_extra_score(frame))
    frame["defaulted"] = _yes_no(rng.random(n) < p)
    frame.insert(0, "application_id", [f"L{i:06d}" for i in range(1, n + 1)])
    return frame


def make_loan_quarter(rng: np.random.Generator, quarter: Quarter, n: int,
                      first_id: int) -> pd.DataFrame:
    """One quarter's applications: id, application_date (ISO, in date order), quarter,
    the nine features and `defaulted` (blank where outcomes are not known yet)."""
    frame = loan_features(rng, n, quarter.revenue_factor)
    new_sector = rng.random(n) < NEW_SECTOR_SHARE
    frame["sector"] = np.where(new_sector, NEW_SECTOR, frame["sector"].to_numpy())
    outcomes = gaps_and_outcomes(rng, frame)  # the truth sees the true late payments
    if quarter.late_feed_fault:
        frame["late_payments_24m"] = 0
    frame["defaulted"] = outcomes if quarter.outcomes_known else None
    days = np.sort(rng.integers(0, quarter.days, size=n))
    frame.insert(0, "quarter", quarter.label)
    frame.insert(0, "application_date", (np.datetime64(quarter.first_day) + days).astype(str))
    frame.insert(0, "application_id", [f"L{i:06d}" for i in range(first_id, first_id + n)])
    return frame


def make_listings(rng: np.random.Generator, n: int) -> pd.DataFrame:
    """Scenario B: cottage listings with a drawn `top_tier` outcome."""
    new_host = rng.random(n) < 0.04
    reviews = rng.negative_binomial(1.2, 1.2 / (1.2 + 35.0), size=n)
    reviews = np.where(new_host, rng.integers(0, 4, size=n), reviews).astype(int)
    hours = np.round(np.clip(np.exp(np.log(3.0) + 1.0 * rng.standard_normal(n)), 0.1, 72.0), 1)
    hours = np.where(new_host, np.nan, hours)
    cleanliness = np.round(1.0 + 4.0 * rng.beta(6.0, 1.5, size=n), 1)
    photos = np.clip(rng.negative_binomial(3.0, 3.0 / 20.0, size=n) + 1, 1, 80).astype(int)
    region_idx = rng.choice(len(REGIONS), size=n, p=np.asarray(REGION_SHARES))
    median_price = np.asarray(REGION_MEDIAN_PRICE)[region_idx]
    log_price = np.log(median_price) + 0.4 * rng.standard_normal(n)
    price = np.round(np.clip(np.exp(log_price), 35.0, 900.0), 2)
    distance = np.round(np.clip(rng.exponential(7.0, size=n), 0.0, 60.0), 2)
    pets = rng.random(n) < 0.35

    frame = pd.DataFrame(
        {
            "listing_id": [f"C{i:05d}" for i in range(1, n + 1)],
            "reviews_count": reviews,
            "host_response_hours": hours,
            "cleanliness_score": cleanliness,
            "photos": photos,
            "nightly_price": price,
            "distance_to_coast_km": distance,
            "pets_allowed": _yes_no(pets),
            "region": np.asarray(REGIONS, dtype=object)[region_idx],
        }
    )
    p = sigmoid(listing_true_score(frame))
    frame["top_tier"] = _yes_no(rng.random(n) < p)
    return frame


# ---------------------------------------------------------------------------
# Writing (the schemas are in demo_schemas.py beside this script)
# ---------------------------------------------------------------------------


def demo_schemas():
    """demo_schemas.py from this script's folder (found by path, so that running this file
    with runpy from anywhere finds it too)."""
    path = Path(__file__).resolve().with_name("demo_schemas.py")
    spec = importlib.util.spec_from_file_location("demo_schemas", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def write_csv(frame: pd.DataFrame, path: Path) -> None:
    """Write a frame with fixed, platform-independent formatting."""
    frame.to_csv(path, index=False, lineterminator="\n", na_rep="")


def write_text(text: str, path: Path) -> None:
    """Write text with "\\n" line endings on every platform."""
    with open(path, "w", encoding="utf-8", newline="\n") as handle:
        handle.write(text)


def rate(frame: pd.DataFrame, column: str) -> float:
    """Share of "yes" in a column."""
    return float((frame[column] == "yes").mean())


def parse_args(argv: Sequence[str] | None) -> argparse.Namespace:
    """Command-line options."""
    parser = argparse.ArgumentParser(description="Write glassbox's invented demo data sets.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="output folder (default: this script's folder)",
    )
    parser.add_argument(
        "--rows-loans", type=int, default=DEFAULT_ROWS_LOANS, help="rows in loans.csv"
    )
    parser.add_argument(
        "--rows-listings", type=int, default=DEFAULT_ROWS_LISTINGS, help="rows in listings.csv"
    )
    parser.add_argument(
        "--big",
        action="store_true",
        help=f"also write loans_big.csv ({BIG_ROWS} rows, 20 features)",
    )
    args = parser.parse_args(argv)
    if args.rows_loans < 1 or args.rows_listings < 1:
        parser.error("row counts must be at least 1")
    return args


def main(argv: Sequence[str] | None = None) -> int:
    """Generate the files and print a one-line summary of each."""
    args = parse_args(argv)
    out: Path = args.out
    out.mkdir(parents=True, exist_ok=True)
    # One independent stream per file, so --big or a row count never changes another file
    # (spawning more streams leaves the first ones as they were).
    loans_seed, listings_seed, big_seed, *quarter_seeds = np.random.SeedSequence(
        args.seed).spawn(3 + len(QUARTERS))
    schemas = demo_schemas()

    loans = make_loans(np.random.default_rng(loans_seed), args.rows_loans)
    write_csv(loans, out / "loans.csv")
    write_text(
        schemas.schema_text("loans.csv", "application_id", "defaulted", schemas.LOAN_SCHEMA,
                           "lower"),
        out / "loans.schema.toml",
    )
    print(f"loans.csv: {len(loans)} rows, default rate {rate(loans, 'defaulted'):.3f}")

    quarters, first_id = [], len(loans) + 1
    for quarter, seed in zip(QUARTERS, quarter_seeds, strict=True):
        frame = make_loan_quarter(np.random.default_rng(seed), quarter, QUARTER_ROWS, first_id)
        first_id += len(frame)
        quarters.append(frame)
        alone = frame.drop(columns=["quarter"] + ([] if quarter.outcomes_known
                                                  else ["defaulted"]))
        write_csv(alone, out / quarter.file)
        outcome = (f"default rate {rate(frame, 'defaulted'):.3f}" if quarter.outcomes_known
                   else "no outcomes yet")
        print(f"{quarter.file}: {len(frame)} rows, {outcome}")
    write_csv(pd.concat(quarters, ignore_index=True), out / QUARTERS_FILE)
    print(f"{QUARTERS_FILE}: the same {first_id - len(loans) - 1} rows in one file, "
          "with a quarter column")

    listings = make_listings(np.random.default_rng(listings_seed), args.rows_listings)
    write_csv(listings, out / "listings.csv")
    write_text(
        schemas.schema_text("listings.csv", "listing_id", "top_tier", schemas.LISTING_SCHEMA,
                           "higher"),
        out / "listings.schema.toml",
    )
    print(f"listings.csv: {len(listings)} rows, top-tier rate {rate(listings, 'top_tier'):.3f}")

    if args.big:
        big = make_loans_big(np.random.default_rng(big_seed), BIG_ROWS)
        write_csv(big, out / "loans_big.csv")
        write_text(
            schemas.schema_text("loans_big.csv", "application_id", "defaulted",
                                schemas.big_schema(), "lower"),
            out / "loans_big.schema.toml",
        )
        print(f"loans_big.csv: {len(big)} rows, default rate {rate(big, 'defaulted'):.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
