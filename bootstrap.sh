#!/usr/bin/env bash
# Set up pashape on a fresh Debian/Ubuntu machine, then run the demo or the tests.
#   bash bootstrap.sh demo    install everything, run the demo
#   bash bootstrap.sh test    install everything, run the whole test suite
# System packages (ngspice, libngspice0-dev; chromium for the report test) are
# installed when run as root or with password-less sudo; otherwise the exact
# command to run is printed and the script stops.
set -euo pipefail
cd "$(dirname "$0")"
what="${1:-}"
case "$what" in demo|test) ;; *) echo "usage: bash bootstrap.sh demo|test" >&2; exit 2 ;; esac

pkgs=(ngspice libngspice0-dev)
[ "$what" = test ] && pkgs+=(chromium)
missing=()
for p in "${pkgs[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then SUDO=""
  elif command -v sudo >/dev/null && sudo -n true 2>/dev/null; then SUDO="sudo"
  else
    echo "pashape needs these system packages: ${missing[*]}" >&2
    echo "Run:  sudo apt-get update && sudo apt-get install -y ${missing[*]}" >&2
    echo "then run this script again (other systems: see ngspice_setup.md)." >&2
    exit 1
  fi
  echo "Installing ${missing[*]} ..."
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq "${missing[@]}" >/dev/null
fi

PY="${PYTHON:-python3}"
if [ ! -x .venv/bin/python ]; then
  "$PY" -m venv .venv
fi
.venv/bin/python -m pip install -q --upgrade pip >/dev/null 2>&1 || true
log="$(mktemp)"
echo "Installing pashape and its Python dependencies into .venv ..."
if ! .venv/bin/python -m pip install -q -e ".[test]" >"$log" 2>&1; then
  cat "$log" >&2
  echo "pip could not install pashape (output above)." >&2
  exit 1
fi
rm -f "$log"

if [ "$what" = demo ]; then
  exec .venv/bin/pashape demo -o pashape-demo
else
  exec .venv/bin/python -m pytest -n 2 -q
fi
