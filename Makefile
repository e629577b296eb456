# Two commands do all the set-up: `make demo` and `make test`. Both create .venv on first use.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
# The CPU build of torch goes in first, so the dependency resolver never pulls a GPU build:
# from PyTorch's own CPU wheel index when it can be reached, else from the default index.
TORCH_SPEC ?= torch==2.13.0
TORCH_INDEX ?= https://download.pytorch.org/whl/cpu
DEMO_EXPERIMENT ?= dochar-demo

.PHONY: install demo test test-all bench bench-smoke funsd-table funsd-table-smoke mutate mutate-smoke replant gate readme-figures clean

install: $(STAMP)

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet --timeout 10 --retries 0 --index-url $(TORCH_INDEX) "$(TORCH_SPEC)" \
	  || { echo "note: $(TORCH_INDEX) could not be reached; installing $(TORCH_SPEC) from the default index"; \
	       $(BIN)/pip install --quiet "$(TORCH_SPEC)"; }
	$(BIN)/pip install --quiet -e '.[test,embed,mutate]' "$(TORCH_SPEC)"   # torch named: kept
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/dochar run -m model=relational,random_forest,layout_template split=seen_and_unseen_layouts \
		tracking.experiment=$(DEMO_EXPERIMENT)
	$(BIN)/dochar report --experiment $(DEMO_EXPERIMENT) --sweep latest
	@echo "The sweep's last line above is the address of its runs in MLflow's UI."

# Slow tests whose results docs/ cites run in `make test` (and so in CI) too.
CITED := "tests/test_determinism.py::test_fresh_processes_with_other_hash_seeds_agree_bit_for_bit" \
         "tests/gate/test_gate.py::test_committed_reference[planted_regression]"

test: $(STAMP)
	$(BIN)/python -m pytest -m "not slow" -q
	$(BIN)/python -m pytest -q $(CITED)

test-all: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python -m benchmarks.run

bench-smoke: $(STAMP)
	$(BIN)/python -m benchmarks.run --smoke --out reports/benchmarks-smoke.md

# The FUNSD results table: every configs/experiment/funsd_*.yaml preset on seeds 0-2, two jobs at
# once with one thread each, into reports/funsd-table.md with its wall time (reports/funsd_table.py;
# long: `make bench` reads its wall time back from that file). The smoke run is a default-suite test.
funsd-table: $(STAMP)
	$(BIN)/python -m reports.funsd_table

funsd-table-smoke: $(STAMP)
	$(BIN)/python -m reports.funsd_table --smoke

# Mutation testing (mutation/run.py): every mutant of the scoring, decoding, splitting, resume and
# loading modules against their tests; the survivors go to reports/mutation.md. Slow (an hour and
# more on two cores); `make mutate-smoke` mutates one small module (a minute), as the tests do.
# The mutate extra (mutmut) is installed with the others: the smoke run is a default-suite test.
MUTATE ?=
mutate: $(STAMP)
	$(BIN)/python -m mutation.run $(MUTATE)

mutate-smoke: $(STAMP)
	$(BIN)/python -m mutation.run --smoke

# The bugs that once slipped past the tests, planted again one at a time (a few minutes).
replant: $(STAMP)
	$(BIN)/python -m mutation.planted

gate: $(STAMP)
	$(BIN)/dochar gate

# The figures README.md and docs/ state about dochar itself, recomputed where they stand: the
# cheap blocks by default (a minute); FIGURES="--all" adds the training runs (half an hour and
# more), FIGURES="--only demo" one block.
FIGURES ?=
readme-figures: $(STAMP)
	$(BIN)/python -m reports.readme_figures $(FIGURES)

clean:
	rm -rf outputs mlflow.db mlartifacts reports/*.html test-artifacts .mutation
