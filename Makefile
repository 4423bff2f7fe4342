# One-command set-up and use. Every target creates or updates the virtual environment first.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed
OUT    ?= out

.PHONY: run test lint serve bench clean samples

KERNELS := geoops/kernel_loader.py geoops/kernels.py geoops/kernels_clean.py

$(STAMP): pyproject.toml $(KERNELS)
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[service,dev]"
	@# the numba kernels: built ahead of time into an extension module (start-up without
	@# numba), and compiled once into numba's cache for the fallback (see geoops/kernel_loader.py)
	$(BIN)/python -m geoops.kernel_build
	RUTWISE_KERNELS=jit $(BIN)/python -c "import geoops.kernels, geoops.kernels_clean"
	@# bytecode for the editable sources, as pip writes it for an installed package: a start
	@# with PYTHONDONTWRITEBYTECODE set would otherwise compile every module (0.05 s)
	$(BIN)/python -m compileall -q geoops service
	touch $(STAMP)

## make run: analyse the bundled sample layers and print a summary
run: $(STAMP)
	@mkdir -p $(OUT)
	$(BIN)/rutwise analyze sample_layers/harrowmere_ranger_walk.geojson \
		--accuracy-field accuracy_m -o $(OUT)/harrowmere_ranger_walk.gpkg
	@echo
	$(BIN)/rutwise analyze sample_layers/harrowmere_analyst.gpkg --layer ruts_digitised \
		--id-field rut_ref -o $(OUT)/harrowmere_analyst.gpkg
	@echo
	$(BIN)/rutwise analyze sample_layers/harrowmere_drone_block.gpkg --id-field trace_ref \
		-o $(OUT)/harrowmere_drone_block.gpkg
	@echo
	@echo "Open $(OUT)/*.gpkg in a desktop GIS: layers passes, ruts and run_metadata."

## make test: lint, type-check and run the whole test suite
test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/mypy
	$(BIN)/python -m pytest -q -n 2 --dist loadgroup

## make serve: start the HTTP processing service on http://127.0.0.1:8000
serve: $(STAMP)
	$(BIN)/rutwise serve

## make samples: rebuild the invented demo scenario in sample_layers/
samples: $(STAMP)
	$(BIN)/python sample_layers/make_samples.py

clean:
	rm -rf $(VENV) $(OUT) .pytest_cache .mypy_cache .ruff_cache
