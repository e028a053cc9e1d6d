"""The schemas of glassbox's invented demo data sets, in the project's TOML shape.

make_demo.py loads this file from its own folder and writes the schema files with it.
"""

from __future__ import annotations

import json
from collections.abc import Sequence

# Each feature: (name, kind, monotone or None, description, extra lines)
Feature = tuple[str, str, str | None, str, tuple[str, ...]]

LOAN_SCHEMA: tuple[Feature, ...] = (
    ("annual_revenue", "number", "decreasing", "Annual revenue, thousands (blank if not stated)",
     ('reason = "Annual revenue is low for the amount of credit sought"',
      'missing = "learn"  # a blank revenue gets its own learned contribution')),
    ("years_trading", "integer", "decreasing", "Whole years the business has traded, years", ()),
    (
        "debt_to_revenue",
        "number",
        "increasing",
        "Existing debt divided by annual revenue, ratio",
        ('reason = "Existing debt is high relative to revenue"',),
    ),
    ("credit_utilisation", "number", None, "Share of credit limits in use, ratio 0 to 1",
     ('reason = "High use of existing credit lines"',)),
    (
        "late_payments_24m",
        "integer",
        "increasing",
        "Late payments in the last 24 months, count",
        ('reason = "Recent late payments on existing credit"',),
    ),
    ("amount_requested", "number", "increasing", "Loan amount requested, thousands", ()),
    ("sector", "category", None, "Business sector, one of seven levels", ()),
    ("premises_owned", "flag", None, "Whether the business owns its premises, yes/no", ()),
    (
        "owner_age_band",
        "category",
        None,
        "Age band of the main owner, years (protected: audits only)",
        ("protected = true",),
    ),
)

BIG_EXTRA_SCHEMA: tuple[Feature, ...] = (
    ("staff_count", "integer", None, "Number of staff, head count", ()),
    ("card_sales_share", "number", None, "Share of sales paid by card, 0 to 1", ()),
    ("invoice_days", "number", None, "Average days until invoices are paid, days", ()),
    ("online_reviews", "integer", None, "Number of online reviews of the business, count", ()),
    ("branch_distance_km", "number", None, "Distance to the nearest branch, km", ()),
    ("seasonality_index", "number", None, "How seasonal sales are, 0 (flat) to 1", ()),
    ("tax_filings_late", "integer", None, "Late tax filings in the last 5 years, count", ()),
    ("director_count", "integer", None, "Number of company directors, count", ()),
    ("account_tenure_months", "integer", None, "Months banking with the lender, months", ()),
    ("loan_purpose", "category", None, "Stated purpose of the loan, one of five levels", ()),
    ("branch_area", "category", None, "Area of the handling branch, one of five levels", ()),
)

LISTING_SCHEMA: tuple[Feature, ...] = (
    ("reviews_count", "integer", "increasing", "Number of guest reviews, count", ()),
    (
        "host_response_hours",
        "number",
        "decreasing",
        "Median time for the host to answer a message, hours (missing for new hosts)",
        ('missing = "learn"  # new hosts have no record: their own learned contribution',),
    ),
    ("cleanliness_score", "number", "increasing", "Average cleanliness rating, 1 to 5", ()),
    ("photos", "integer", "increasing", "Number of photos on the listing, count", ()),
    ("nightly_price", "number", None, "Price per night, currency units", ()),
    ("distance_to_coast_km", "number", "decreasing", "Distance to the coast, km", ()),
    ("pets_allowed", "flag", None, "Whether pets are allowed, yes/no", ()),
    ("region", "category", None, "Region of the cottage, one of six levels", ()),
)


def schema_text(csv_name: str, id_column: str, target: str, features: Sequence[Feature],
                better: str) -> str:
    """Render a schema file in the project's TOML shape."""
    lines = [
        f"# Schema for {csv_name} (edit freely; see the project README)",
        "# Written by demo_data/make_demo.py; rerunning the script rewrites this file.",
        f"id = {json.dumps(id_column)}",
        "",
        "[target]",
        f"column = {json.dumps(target)}",
        'task = "classification"',
        'positive = "yes"',
        f'better = "{better}"  # which way the score is better for the applicant or owner',
    ]
    for name, kind, monotone, description, extra in features:
        lines += ["", f"[feature.{name}]", f'kind = "{kind}"']
        if monotone is not None:
            lines.append(f'monotone = "{monotone}"')
        lines.append(f"description = {json.dumps(description)}")
        lines += list(extra)
    return "\n".join(lines) + "\n"


def big_schema() -> tuple[Feature, ...]:
    """Schema of loans_big.csv: the loan features, with the true monotone extras marked."""
    marked = {
        "staff_count": "decreasing",
        "card_sales_share": "decreasing",
        "invoice_days": "increasing",
        "tax_filings_late": "increasing",
    }
    extras = tuple(
        (name, kind, marked.get(name, monotone), description, extra)
        for name, kind, monotone, description, extra in BIG_EXTRA_SCHEMA
    )
    return LOAN_SCHEMA + extras
