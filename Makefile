# Named targets for contributors; CI runs .ci/run.
PY ?= python3

.PHONY: build develop test test-rust test-python bench bench-quick lint format clean

build:            ## build and install the package from source
	$(PY) -m pip install .

develop:          ## editable install (rebuild after Rust changes with this target again)
	$(PY) -m pip install -e '.[test,bench,lint]'

test: test-rust test-python

test-rust:
	cargo test --release

test-python:
	$(PY) -m pytest -q

bench:            ## kernel benchmark; writes bench/results/kernels.json
	$(PY) bench/kernels.py

bench-quick:      ## smoke run of the benchmark; writes bench/results/quick.json (not kernels.json)
	$(PY) bench/kernels.py --quick --out bench/results/quick.json

lint:
	cargo fmt --check
	cargo clippy --all-targets --features python -- -D warnings
	RUSTDOCFLAGS="-D warnings" cargo doc --no-deps --document-private-items --features python
	ruff check python tests bench
	ruff format --check python tests bench

format:
	cargo fmt
	ruff format python tests bench
	ruff check --fix python tests bench

clean:
	cargo clean
	rm -rf build dist python/orthoclimb/_core*.so
