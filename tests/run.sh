#!/usr/bin/env bash
# The project's one test command: installs the test peers when missing, then runs
# formatting, lints, the build, every workspace test and the doc tests, and prints a summary.
# Runs every step even after a failure; exits non-zero if any step failed.
set -euo pipefail

repo_root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$repo_root"

# Pinned peer versions: pymodbus's API churns between minor releases.
readonly PYMODBUS_VERSION="3.16.1"
readonly PYSERIAL_VERSION="3.5"
# Validates the MQTT payloads against docs/mqtt/*.schema.json (a general-purpose JSON Schema library).
readonly JSONSCHEMA_VERSION="4.26.0"
readonly VENV_DIR="$repo_root/target/peers-venv"

log() { printf '==> %s\n' "$*"; }
die() { printf 'tests/run.sh: %s\n' "$*" >&2; exit 1; }

is_root() { [ "$(id -u)" -eq 0 ]; }

# Debian packages that provide the serial/TCP peers: command name -> package name.
apt_install() {
  # A fresh machine's apt lists may be empty or stale: update only if the plain install fails.
  if ! DEBIAN_FRONTEND=noninteractive capped 10 apt-get install -y --no-install-recommends "$@"; then
    log "apt-get install failed; running apt-get update and retrying"
    capped 10 apt-get update
    DEBIAN_FRONTEND=noninteractive capped 10 apt-get install -y --no-install-recommends "$@"
  fi
}

install_debian_peers() {
  local missing=() commands=()
  # command:package; the MQTT broker's clients (mosquitto_sub) come in mosquitto-clients.
  local pair cmd
  for pair in socat:socat mbpoll:mbpoll mosquitto:mosquitto mosquitto_sub:mosquitto-clients; do
    cmd="${pair%%:*}"
    if ! command -v "$cmd" >/dev/null 2>&1; then
      missing+=("${pair#*:}")
      commands+=("$cmd")
    fi
  done
  [ "${#missing[@]}" -eq 0 ] && return 0
  if ! is_root; then
    die "missing test peers: ${missing[*]}; install them (e.g. sudo apt-get install -y ${missing[*]}) or run as root"
  fi
  log "installing Debian packages: ${missing[*]}"
  apt_install "${missing[@]}" || die "could not install ${missing[*]} with apt-get; install them by hand"
  for cmd in "${commands[@]}"; do
    command -v "$cmd" >/dev/null 2>&1 || die "$cmd still not on PATH after installing it"
  done
}

pick_python() {
  local candidate
  for candidate in python3.11 python3; do
    if command -v "$candidate" >/dev/null 2>&1; then
      printf '%s\n' "$candidate"
      return 0
    fi
  done
  return 1
}

venv_versions_ok() {
  [ -x "$VENV_DIR/bin/python" ] || return 1
  "$VENV_DIR/bin/python" - "$PYMODBUS_VERSION" "$PYSERIAL_VERSION" "$JSONSCHEMA_VERSION" <<'PY' >/dev/null 2>&1
import sys
from importlib.metadata import version
want_pymodbus, want_pyserial, want_jsonschema = sys.argv[1], sys.argv[2], sys.argv[3]
ok = (version("pymodbus") == want_pymodbus and version("pyserial") == want_pyserial
      and version("jsonschema") == want_jsonschema)
sys.exit(0 if ok else 1)
PY
}

install_python_peers() {
  if venv_versions_ok; then
    return 0
  fi
  local python
  python="$(pick_python)" || die "no python3 found; install python3 (3.11) with venv support"
  if [ ! -x "$VENV_DIR/bin/python" ]; then
    log "creating venv $VENV_DIR with $python"
    mkdir -p "$(dirname "$VENV_DIR")"
    if ! "$python" -m venv "$VENV_DIR"; then
      rm -rf "$VENV_DIR"
      # Debian's own python3 ships venv/ensurepip in a separate package.
      if is_root && command -v apt-get >/dev/null 2>&1; then
        log "python venv module unusable; installing python3-venv"
        apt_install python3-venv || die "could not install python3-venv; install it by hand"
        "$python" -m venv "$VENV_DIR" || die "could not create venv at $VENV_DIR; install python3-venv"
      else
        die "could not create venv at $VENV_DIR; install python3-venv"
      fi
    fi
  fi
  log "installing pymodbus==$PYMODBUS_VERSION pyserial==$PYSERIAL_VERSION jsonschema==$JSONSCHEMA_VERSION into $VENV_DIR"
  capped 10 "$VENV_DIR/bin/python" -m pip install --disable-pip-version-check --quiet \
    "pymodbus==$PYMODBUS_VERSION" "pyserial==$PYSERIAL_VERSION" "jsonschema==$JSONSCHEMA_VERSION" \
    || die "could not pip install pymodbus==$PYMODBUS_VERSION pyserial==$PYSERIAL_VERSION jsonschema==$JSONSCHEMA_VERSION into $VENV_DIR"
  venv_versions_ok || die "venv $VENV_DIR does not hold pymodbus==$PYMODBUS_VERSION, pyserial==$PYSERIAL_VERSION and jsonschema==$JSONSCHEMA_VERSION after installing"
}

# ---- browser suite ----------------------------------------------------------
# Debian's chromium driven by playwright-core (pinned in tests/browser/package.json).
readonly CHROMIUM_BIN="${OEDOLOG_CHROMIUM:-/usr/bin/chromium}"
readonly BROWSER_DIR="$repo_root/tests/browser"

install_browser() {
  if [ ! -x "$CHROMIUM_BIN" ]; then
    is_root || die "chromium missing at $CHROMIUM_BIN; install it (sudo apt-get install -y chromium) or run as root"
    log "installing Debian package: chromium"
    apt_install chromium || die "could not install chromium with apt-get; install it by hand"
    [ -x "$CHROMIUM_BIN" ] || die "chromium still not at $CHROMIUM_BIN after installing it"
  fi
  if ! command -v node >/dev/null 2>&1 || ! command -v npm >/dev/null 2>&1; then
    is_root || die "node/npm missing; install them (sudo apt-get install -y nodejs npm) or run as root"
    log "installing Debian packages: nodejs npm"
    apt_install nodejs npm || die "could not install nodejs and npm with apt-get; install them by hand"
  fi
  if [ ! -d "$BROWSER_DIR/node_modules/playwright-core" ]; then
    log "installing tests/browser's npm packages (npm ci)"
    (cd "$BROWSER_DIR" && capped 5 npm ci --no-audit --no-fund) \
      || die "npm ci in tests/browser failed; the suite needs playwright-core from the npm registry"
  fi
}

run_browser_suite() {
  install_browser
  OEDOLOG_CHROMIUM="$CHROMIUM_BIN" capped 5 node "$BROWSER_DIR/run.mjs" "$repo_root/target/debug/oedolog"
}

# ---- steps ------------------------------------------------------------------

step_names=()
step_results=()
step_seconds=()
any_failed=0

run_step() {
  local name="$1"
  shift
  log "step: $name: $*"
  local started=$SECONDS status=0
  # A subshell, so that a step's `exit` (die) ends only that step and the others still run.
  ( "$@" ) || status=$?
  local took=$((SECONDS - started))
  step_names+=("$name")
  step_seconds+=("$took")
  if [ "$status" -eq 0 ]; then
    step_results+=("ok")
  elif [ "$status" -eq 124 ] || [ "$status" -eq 137 ]; then
    step_results+=("FAILED (time cap)")
    any_failed=1
  else
    step_results+=("FAILED (exit $status)")
    any_failed=1
  fi
  log "step: $name: ${step_results[-1]} in ${took}s"
}

# Caps each step's wall time so a hung test cannot eat CI's 90 minutes and the summary still prints;
# the caps add up to under 90 min and sit far above a cold 2-core run.
capped() {
  local minutes="$1"
  shift
  timeout --kill-after=30s "${minutes}m" "$@"
}

run_workspace_tests() {
  if command -v cargo-nextest >/dev/null 2>&1; then
    capped 35 cargo nextest run --workspace --no-fail-fast
  else
    log "cargo-nextest not found; falling back to cargo test"
    capped 35 cargo test --workspace --no-fail-fast
  fi
}

install_peers() {
  install_debian_peers
  install_python_peers
}

# The peers are needed by the e2e suites; a failed install fails the whole run
# rather than letting those suites be skipped.
run_step "install peers" install_peers
if [ "${step_results[-1]}" != "ok" ]; then
  printf 'tests/run.sh: peer install failed; see the message above for what to install\n' >&2
fi

export OEDOLOG_PEER_PYTHON="$VENV_DIR/bin/python"
# Failing tests should show where they failed.
export RUST_BACKTRACE="${RUST_BACKTRACE:-1}"

run_step "cargo fmt" capped 2 cargo fmt --all --check
run_step "cargo clippy" capped 20 cargo clippy --workspace --all-targets -- -D warnings
run_step "cargo build bins" capped 15 cargo build --workspace --bins
run_step "workspace tests" run_workspace_tests
run_step "browser suite" run_browser_suite
run_step "doc tests" capped 8 cargo test --workspace --doc

printf '\n%-20s %-20s %8s\n' "step" "result" "seconds"
printf '%-20s %-20s %8s\n' "--------------------" "--------------------" "--------"
for i in "${!step_names[@]}"; do
  printf '%-20s %-20s %8s\n' "${step_names[$i]}" "${step_results[$i]}" "${step_seconds[$i]}"
done
printf 'total: %ss\n' "$SECONDS"

if [ "$any_failed" -ne 0 ]; then
  printf 'tests/run.sh: some steps FAILED\n' >&2
  exit 1
fi
