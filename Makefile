# Set-up, demo, tests and benchmarks. Everything installs into .venv on first use.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
OUT    := demo_out
GB     := $(BIN)/glassbox

.PHONY: install demo test lint bench clean browser engines

install: $(STAMP)

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e ".[test]"
	@echo "compiling the recourse solver and the spline kernels once (numba; cached)"
	$(BIN)/python -m recourse.warm
	$(BIN)/python -m glassbox.fitting.warm
	touch $(STAMP)

demo: $(STAMP)
	@mkdir -p $(OUT)
	@echo "== 1. a starter schema from the loan applications (to check and edit by hand)"
	$(GB) schema demo_data/loans.csv --target defaulted --out $(OUT)/loans.inferred.toml
	@echo "== 2. fit the three glass-box families with the checked schema"
	$(GB) fit demo_data/loans.csv --schema demo_data/loans.schema.toml --family sparse --out $(OUT)/loans.sparse.json
	$(GB) fit demo_data/loans.csv --schema demo_data/loans.schema.toml --family spline --out $(OUT)/loans.spline.json
	$(GB) fit demo_data/loans.csv --schema demo_data/loans.schema.toml --family boosted --ensemble 5 --out $(OUT)/loans.boosted.json
	@echo "== 3. what does going glass-box cost? every family and a black box, same folds"
	$(GB) compare demo_data/loans.csv --schema demo_data/loans.schema.toml --jobs 2 --out $(OUT)/loans.compare.json
	@echo "== 4. score every application: score, probability, per-feature contributions"
	$(GB) score $(OUT)/loans.spline.json demo_data/loans.csv --out $(OUT)/loans.scores.csv
	@head -3 $(OUT)/loans.scores.csv | cut -c1-80
	@echo "== 5. the spline model's tables for auditors: importance and two features"
	@echo "       (revenue has a row for a blank; --at marks the row a value falls in)"
	$(GB) shapes $(OUT)/loans.spline.json --feature late_payments_24m
	$(GB) shapes $(OUT)/loans.spline.json --feature annual_revenue --at 1500
	@echo "== 6. every table as files, and a picture of every shape"
	$(GB) shapes $(OUT)/loans.spline.json --format csv --out $(OUT)/spline-tables --plot $(OUT)/spline-plots
	$(GB) shapes $(OUT)/loans.boosted.json --format markdown --out $(OUT)/boosted-tables --plot $(OUT)/boosted-plots
	@echo "== 7. the cottage listings: which reach the top rating tier"
	$(GB) fit demo_data/listings.csv --schema demo_data/listings.schema.toml --family spline --out $(OUT)/listings.spline.json
	$(GB) shapes $(OUT)/listings.spline.json --feature nightly_price --plot $(OUT)/listings-plots
	@echo "       price matters differently near the coast: boosted, 2 strongest pairs"
	$(GB) fit demo_data/listings.csv --schema demo_data/listings.schema.toml --family boosted --pairs 2 --out $(OUT)/listings.boosted.json
	$(GB) shapes $(OUT)/listings.boosted.json --pair 'nightly_price & distance_to_coast_km' --plot $(OUT)/listings-plots
	@echo "== 8. recourse: what could a declined applicant change?"
	@echo "       (the rules: demo_data/loans.mutability.toml)"
	$(BIN)/recourse template $(OUT)/loans.spline.json --out $(OUT)/loans.mutability.template.toml --force
	$(BIN)/recourse plan $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data demo_data/loans.csv --id L001096
	@echo "== 9. an applicant who left revenue blank: a plan may state it (supply_cost)"
	$(BIN)/recourse plan $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data demo_data/loans.csv --id L000033 --plans 2
	@echo "== 9b. an applicant for whom no plan exists within the rules"
	$(BIN)/recourse plan $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data demo_data/loans.csv --id L003719 --plans 1
	@echo "== 10. a cottage listing below the top tier"
	$(BIN)/recourse plan $(OUT)/listings.spline.json --mutability demo_data/listings.mutability.toml --data demo_data/listings.csv --id C02455 --plans 2
	@echo "       a listing on the model with pairs: a plan that moves a pair's value"
	$(BIN)/recourse plan $(OUT)/listings.boosted.json --mutability demo_data/listings.mutability.toml --data demo_data/listings.csv --id C00057 --plans 1
	@echo "== 11. plans for every declined application among the first 1,000, as CSV"
	@head -1001 demo_data/loans.csv > $(OUT)/loans.first1000.csv
	$(BIN)/recourse plan $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data $(OUT)/loans.first1000.csv --declined --plans 1 --out $(OUT)/loans.plans.csv
	@echo "== 12. reasons: what holds two declined applicants furthest below the best"
	@echo "       (one left revenue blank)"
	$(GB) reasons $(OUT)/loans.spline.json demo_data/loans.csv --id L001096
	$(GB) reasons $(OUT)/loans.spline.json demo_data/loans.csv --id L000033 --top 3
	$(GB) reasons $(OUT)/loans.spline.json demo_data/loans.csv --all --cutoff 0.3 --out $(OUT)/loans.reasons.csv
	@echo "== 13. a points scorecard from the spline model, checked against the exact"
	@echo "       score at the cut-off"
	$(GB) points $(OUT)/loans.spline.json --data demo_data/loans.csv --cutoff 0.3 --out $(OUT)/loans.card.json
	$(GB) points $(OUT)/loans.spline.json --cutoff 0.3 --out $(OUT)/loans.card.csv
	$(GB) score --points $(OUT)/loans.card.json demo_data/loans.csv --out $(OUT)/loans.points.csv
	@head -3 $(OUT)/loans.points.csv | cut -c1-80
	@echo "== 14. recourse for every application: who can reach the goal, at what cost,"
	@echo "       by group"
	$(BIN)/recourse reach $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data demo_data/loans.csv --by owner_age_band --by sector --jobs 2
	$(BIN)/recourse reach $(OUT)/loans.spline.json --mutability demo_data/loans.mutability.toml --data demo_data/loans.csv --by owner_age_band --by sector --jobs 2 --out $(OUT)/loans.reach.json
	@echo "== 15. the audit report: one self-contained HTML file, and the same in Markdown"
	$(GB) report $(OUT)/loans.spline.json --data demo_data/loans.csv --comparison $(OUT)/loans.compare.json --recourse $(OUT)/loans.reach.json --cutoff 0.3 --out $(OUT)/report
	@echo "== 16. monitoring: two later quarters against the development sample the"
	@echo "       model file carries (a downturn cuts revenue in both; a feed fault"
	@echo "       zeroes late payments in 2026-Q3, whose outcomes are not in yet)"
	$(GB) monitor $(OUT)/loans.spline.json demo_data/loans_quarters.csv --period quarter --points $(OUT)/loans.card.json --page $(OUT)/monitoring.html
	@echo "       one file per quarter (loans_q3.csv has no outcomes yet), tables as JSON"
	$(GB) monitor $(OUT)/loans.spline.json demo_data/loans_q2.csv demo_data/loans_q3.csv --out $(OUT)/monitoring.json
	@echo "== 17. deploy: the spline model as one SQL query and as PMML 4.4; the card too"
	$(GB) export $(OUT)/loans.spline.json --table loans --contributions --reasons 2 --out $(OUT)/loans.score.sql
	$(GB) export $(OUT)/loans.spline.json --out $(OUT)/loans.spline.pmml
	$(GB) export --points $(OUT)/loans.card.json --table loans --contributions --out $(OUT)/loans.points.sql
	$(GB) export --points $(OUT)/loans.card.json --out $(OUT)/loans.card.pmml
	@echo "       the query run in SQLite (Python's own) on the applications: the same"
	@echo "       numbers as glassbox score's first rows above"
	@$(BIN)/python -c "import sqlite3, pandas as p; c = sqlite3.connect(':memory:'); p.read_csv('demo_data/loans.csv').to_sql('loans', c); print(p.read_sql(open('$(OUT)/loans.score.sql').read(), c).iloc[:2, :3].to_string(index=False))"
	@echo "== 18. a new version: the spline refitted on the downturn quarter alone,"
	@echo "       reviewed against the first"
	$(GB) fit demo_data/loans_q2.csv --schema demo_data/loans.schema.toml --family spline --out $(OUT)/loans_q2.spline.json
	$(GB) changes $(OUT)/loans.spline.json $(OUT)/loans_q2.spline.json demo_data/loans_q2.csv --cutoff 0.3
	$(GB) changes $(OUT)/loans.spline.json $(OUT)/loans_q2.spline.json demo_data/loans_q2.csv --cutoff 0.3 --out $(OUT)/loans.changes.md
	@echo "== done: models, tables, pictures, plans, the reach summary, the scorecard,"
	@echo "   the report, the monitoring page, the exports and the change review are in"
	@echo "   $(OUT)/"

test: $(STAMP) browser engines
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q -n 2  # two processes side by side (pytest-xdist): two cores

# headless Chromium for the report's browser test, installed only where it can be
# (Debian, as root); never fails: the test skips itself without it
browser:
	@command -v chromium >/dev/null || (command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ] \
	  && (DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium >/dev/null 2>&1 \
	  || (apt-get update -q >/dev/null 2>&1 \
	  && DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium >/dev/null 2>&1))) \
	  || echo "chromium not installed: the report's browser test will be skipped"

# a PostgreSQL server and a Java runtime for the export tests (the SQL run in PostgreSQL,
# the PMML scored by an independent Java scorer), installed only where they can be
# (Debian, as root); never fails: those tests skip themselves, saying why, without them
engines:
	@for need in "pg_ctl postgresql" "java default-jre-headless"; do set -- $$need; \
	  command -v $$1 >/dev/null || ls /usr/lib/postgresql/*/bin/$$1 >/dev/null 2>&1 \
	  || (command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ] \
	  && (DEBIAN_FRONTEND=noninteractive apt-get install -y -q $$2 >/dev/null 2>&1 \
	  || (apt-get update -q >/dev/null 2>&1 \
	  && DEBIAN_FRONTEND=noninteractive apt-get install -y -q $$2 >/dev/null 2>&1))) \
	  || echo "$$2 not installed: the export tests that need it will be skipped"; done

lint: $(STAMP)
	$(BIN)/ruff check .

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(OUT) bench/out .pytest_cache .ruff_cache
