# Set-up, demo, tests and benchmarks. Everything installs into .venv on first use.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
OUT    := demo_out
GB     := $(BIN)/glassbox

.PHONY: install demo test lint bench clean

install: $(STAMP)

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e ".[test]"
	touch $(STAMP)

demo: $(STAMP)
	@mkdir -p $(OUT)
	@echo "== 1. infer a starter schema from the loan applications (to edit by hand)"
	$(GB) schema demo_data/loans.csv --target defaulted --out $(OUT)/loans.inferred.toml
	@echo "== 2. fit a sparse logistic model with the checked schema"
	$(GB) fit demo_data/loans.csv --schema demo_data/loans.schema.toml --out $(OUT)/loans.sparse.json
	@echo "== 3. the same family held to four features"
	$(GB) fit demo_data/loans.csv --schema demo_data/loans.schema.toml --max-features 4 --out $(OUT)/loans.sparse4.json
	@echo "== 4. score every application: score, probability, per-feature contributions"
	$(GB) score $(OUT)/loans.sparse.json demo_data/loans.csv --out $(OUT)/loans.scores.csv
	@head -4 $(OUT)/loans.scores.csv | cut -c1-150
	@echo "== 5. the model's tables, for auditors"
	$(GB) shapes $(OUT)/loans.sparse4.json
	$(GB) shapes $(OUT)/loans.sparse.json --format markdown --out $(OUT)/loans.shapes.md
	@echo "== 6. the cottage listings: which reach the top rating tier"
	$(GB) fit demo_data/listings.csv --schema demo_data/listings.schema.toml --out $(OUT)/listings.sparse.json
	$(GB) shapes $(OUT)/listings.sparse.json --feature nightly_price
	@echo "== done: files in $(OUT)/"

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/ruff check .

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(OUT) bench/out .pytest_cache .ruff_cache
