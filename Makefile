# assay: two commands do everything on a fresh Debian or Ubuntu machine with Rust.
#   make demo   build, ensure OpenBLAS, run the bundled example end to end into runs/
#   make test   the whole test suite
CARGO ?= cargo
STUDY ?= models/tensile-bar/study.yaml

.PHONY: demo test build openblas lint clean-runs

# OpenBLAS (with LAPACK) is the linear-algebra backend (ndarray-linalg, openblas-system).
openblas:
	@if dpkg-query -W -f='$${Status}' libopenblas-dev 2>/dev/null | grep -q 'ok installed' \
	   || ldconfig -p 2>/dev/null | grep -q 'libopenblas\.so '; then \
	  true; \
	elif [ "$$(id -u)" = 0 ]; then \
	  echo "installing OpenBLAS: apt-get install libopenblas-dev"; \
	  apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends libopenblas-dev pkg-config; \
	elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then \
	  echo "installing OpenBLAS: sudo apt-get install libopenblas-dev"; \
	  sudo apt-get update && sudo DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends libopenblas-dev pkg-config; \
	else \
	  echo "OpenBLAS is missing. Install it, then run make again:"; \
	  echo "    sudo apt-get install libopenblas-dev"; \
	  exit 1; \
	fi

build: openblas
	$(CARGO) build --release --workspace --bins

demo: build
	./target/release/assay all $(STUDY)
	@echo
	@echo "Results: runs/tensile-bar/ (design.yaml, runs/, surrogate.yaml, posterior.yaml, posterior-samples.csv, checks.yaml, report.html)"
	@echo "Quick example: ./target/release/assay all models/cantilever/study.yaml"
	@echo "Again:   ./target/release/assay all $(STUDY)   (finished stages are reused)"

# The example simulator binary is built first: the end-to-end test runs it as an
# external command, as a user's simulator would be.
test: build
	$(CARGO) test --release --workspace

lint:
	$(CARGO) fmt --all -- --check
	$(CARGO) clippy --release --workspace --all-targets -- -D warnings

clean-runs:
	find runs -mindepth 1 -maxdepth 1 ! -name README.md -exec rm -rf {} +
