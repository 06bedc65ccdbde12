#!/usr/bin/env bash
# Makes a Python with prometheus_client, grpcio and grpcio-tools available
# to the daemon's interoperability tests (tests/daemon_python.rs), and
# writes its path to $CARGO_TARGET_DIR/test-python (default target/).
#
# Uses the system python3 when it already has the packages; otherwise a
# virtual environment under target/test-venv; otherwise `pip --user`.
# Run it once before `cargo test` (CI: from .ci/run).
set -euo pipefail
cd "$(dirname "$0")/.."
target="${CARGO_TARGET_DIR:-target}"
mkdir -p "$target"
target="$(cd "$target" && pwd)"
packages=(prometheus_client grpcio grpcio-tools)

has_all() { "$1" -c "import prometheus_client, grpc, grpc_tools" 2>/dev/null; }
record() { echo "$1" > "$target/test-python"; echo "test python: $1 ($("$1" --version 2>&1))"; }

py="$(command -v python3 || true)"
if [ -z "$py" ]; then
  echo "setup-test-python: python3 not found" >&2
  exit 1
fi
if has_all "$py"; then
  record "$py"
  exit 0
fi
venv="$target/test-venv"
if [ -x "$venv/bin/python" ] || "$py" -m venv "$venv" 2>/dev/null; then
  if "$venv/bin/python" -m pip install -q "${packages[@]}" && has_all "$venv/bin/python"; then
    record "$venv/bin/python"
    exit 0
  fi
fi
"$py" -m pip install -q --user "${packages[@]}"
if has_all "$py"; then
  record "$py"
  exit 0
fi
echo "setup-test-python: could not install ${packages[*]}" >&2
exit 1
