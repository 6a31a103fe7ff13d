#!/usr/bin/env bash
# attacks.sh builds the quern binary and replays every attack of the
# hostile-input review against it (scripts/attacks/main.go says what each
# is and when it holds). Prints "held" or "FAILED" per attack; exits 1 if
# any failed. Run from anywhere; about a minute on two cores.
set -euo pipefail
cd "$(dirname "$0")/.."
bin="$(mktemp -d)/quern"
trap 'rm -rf "$(dirname "$bin")"' EXIT
go build -o "$bin" ./cmd/quern
go run ./scripts/attacks -bin "$bin" -root .
