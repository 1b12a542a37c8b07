# saxsnb: the two commands a newcomer needs are `make demo` and `make test`.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
PORT ?= 8888
DEMO_DIR ?= demo-data
APP_NB ?= notebooks/app-flow-growth.ipynb

.PHONY: install demo demo-data test lint unit notebooks browser-deps app bench clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip
	$(BIN)/python -m pip install -q -e ".[all]"
	touch $(STAMP)

install: $(STAMP)

$(DEMO_DIR)/.written: $(STAMP)
	$(BIN)/python -m saxsnb demo --out $(DEMO_DIR)
	touch $@

demo-data: $(DEMO_DIR)/.written

# Open JupyterLab on the quickstart notebook; NOBROWSER=1 for a headless machine. Its file
# browser starts at the top of the repository (root_dir), where demo-data/ and notebooks/
# sit side by side (without it Lab serves notebooks/ only and the demo data are out of reach).
demo: install demo-data
	$(BIN)/python -m jupyterlab notebooks/01-quickstart.ipynb --ServerApp.root_dir=. \
		--ip=127.0.0.1 --port=$(PORT) $(if $(NOBROWSER),--no-browser,) --ServerApp.allow_root=True

# A code-free page for collaborators (Voila: outputs only, no code), on 127.0.0.1.
# Like JupyterLab it needs a token: a new random one each run (or APP_TOKEN=...), printed
# with the URL to open. Another notebook: `make app APP_NB=notebooks/02-phase-ramp.ipynb`;
# NOBROWSER=1 on a headless machine.
app: install
	@TOKEN="$${APP_TOKEN:-$$($(BIN)/python -c 'import secrets; print(secrets.token_hex(24))')}"; \
	echo "code-free page: http://127.0.0.1:$(PORT)/?token=$$TOKEN"; \
	$(BIN)/python -m voila $(APP_NB) --Voila.ip=127.0.0.1 --port=$(PORT) --Voila.port_retries=0 \
		--Voila.token="$$TOKEN" $(if $(NOBROWSER),--no-browser,)

# Debian's chromium (/usr/bin/chromium, the path tests/browser uses) for the real-browser
# tests; CI runs as root, elsewhere sudo is used. Never `playwright install`.
browser-deps:
	@test -x /usr/bin/chromium || \
		{ echo "installing Debian chromium for the browser tests"; \
		  if [ "$$(id -u)" = 0 ]; then AS=; else AS=sudo; fi; \
		  $$AS apt-get update -qq && \
		  $$AS env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; }

lint: install
	$(BIN)/ruff check .

unit: install
	$(BIN)/python -m pytest -q -m "not browser" tests saxsnb

notebooks: install
	$(BIN)/python -m pytest -q --nbval-lax -p no:cacheprovider notebooks

test: install browser-deps
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -q tests saxsnb
	$(BIN)/python -m pytest -q --nbval-lax notebooks

bench: install
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) $(DEMO_DIR) .pytest_cache
