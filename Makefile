# One command sets up and runs the demo; one sets up and runs the tests.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: setup demo test sample-reports bench sbc clean

$(STAMP): pyproject.toml requirements.lock
	bash scripts/ensure_system_packages.sh
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -c requirements.lock -e ".[test]"
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/reportgen demo --out demo_output

test: $(STAMP)
	$(BIN)/ruff check reportgen tests scripts benchmarks
	$(BIN)/python -m pytest -q

sample-reports: $(STAMP)
	$(BIN)/python scripts/make_demo_data.py
	rm -rf sample_reports
	$(BIN)/reportgen demo --out sample_reports || test $$? -eq 1
	# the draws are large, and run.log and SHA256SUMS carry clock times: kept out of the repository
	rm -rf sample_reports/*/draws sample_reports/*/run.log sample_reports/*/SHA256SUMS

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_compile.py
	$(BIN)/python benchmarks/bench_fit.py
	$(BIN)/python benchmarks/bench_pairs.py
	$(BIN)/python benchmarks/bench_student_t.py
	$(BIN)/python benchmarks/bench_groups.py
	$(BIN)/python benchmarks/bench_report.py
	$(BIN)/python benchmarks/bench_summaries.py
	$(BIN)/python benchmarks/bench_exact_pair.py
	$(BIN)/python benchmarks/bench_executors.py
	$(BIN)/python benchmarks/bench_csv.py
	$(BIN)/python benchmarks/bench_rows.py
	$(BIN)/python benchmarks/bench_loading.py
	$(BIN)/python benchmarks/bench_scale.py

sbc: $(STAMP)
	$(BIN)/python benchmarks/sbc.py

clean:
	rm -rf $(VENV) demo_output reportgen-demo .pytest_cache
