#!/usr/bin/env bash
# Install gloam with its test extra into ./.venv and run the whole test suite.
# This is the README's test command; .ci/run calls it too.
set -euo pipefail
cd "$(dirname "$0")/.."
python3 -m venv .venv
.venv/bin/python -m pip install --quiet --upgrade pip
.venv/bin/python -m pip install --quiet -e '.[test,fast]'
.venv/bin/python -m ruff check src tests scripts
.venv/bin/python -m ruff format --check src tests scripts
.venv/bin/python -m pytest "$@"
