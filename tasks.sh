#!/usr/bin/env bash
# bodysweep task runner: set-up is done by every task, so each command works on a fresh machine.
#   bash tasks.sh demo   set up, then run the demo study end to end
#   bash tasks.sh test   set up, then run the whole test suite
#   bash tasks.sh setup  set up only (idempotent; seconds when nothing changed)
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
cd "$ROOT"
task="${1:-help}"; shift || true
case "$task" in
  setup) bash scripts/setup.sh ;;
  test)
    bash scripts/setup.sh
    exec .venv/bin/python -m pytest "$@" ;;
  demo)
    bash scripts/setup.sh
    exec .venv/bin/bodysweep run studies/demo_forearm_capsule.yaml "$@" ;;
  *) echo "usage: bash tasks.sh {demo|test|setup} [extra args]"; exit 2 ;;
esac
