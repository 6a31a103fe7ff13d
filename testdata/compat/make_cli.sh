#!/usr/bin/env bash
# make_cli.sh wrote cli-ae.ckpt and cli-ae.qm with the command line as it
# stood at commit 0295ee8 (before the architecture change): the checkpoint
# of a run killed during its third save (after epoch 2 of 4), whose settings
# are stored as command-line strings, and the model file of the same run
# left to finish. Run it from the repository root of that commit:
#
#	git worktree add /tmp/quern-0295ee8 0295ee8
#	cp testdata/compat/make_cli.sh /tmp/quern-0295ee8/testdata/compat/
#	(cd /tmp/quern-0295ee8 && bash testdata/compat/make_cli.sh)
set -euo pipefail
cd "$(dirname "$0")"
bin="$(mktemp -d)/quern"
(cd ../.. && go build -o "$bin" ./cmd/quern)
args=(train -kind ae -data ../sklearn/breast_cancer.csv -no-header -skip 1 -label c30 -hidden 8 -latent 3
	-epochs 4 -batch 32 -seed 2 -val 0.2 -false-alarm 0.05 -every 1 -quiet)
tmp="$(mktemp -d)"
"$bin" "${args[@]}" -out "$tmp/cli-ae.qm"
cp "$tmp/cli-ae.qm" cli-ae.qm
rm -f "$tmp"/*
set +e
QUERN_TEST_CRASH_IN_SAVE=3 "$bin" "${args[@]}" -out "$tmp/cli-ae.qm"
code=$?
set -e
[ "$code" = 3 ] || { echo "expected the crash hook's exit 3, got $code"; exit 1; }
cp "$tmp/cli-ae.qm.ckpt" cli-ae.ckpt
rm -rf "$tmp" "$(dirname "$bin")"
