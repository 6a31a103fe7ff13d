#!/usr/bin/env bash
# Training on a CSV file larger than memory (-stream) under a GOMEMLIMIT
# under a quarter of the file's size, twice with one seed (the model files must
# be the same, byte for byte), once parsing the file on every pass
# (-cache none), against the same training in memory
# without a limit: wall time, peak RSS and the validation loss of each.
#   bash bench/stream.sh              (2M rows x 32 columns, a 435 MiB CSV, GOMEMLIMIT 100MiB: about 2 minutes)
#   ROWS=500000 LIMIT=32MiB bash bench/stream.sh
set -euo pipefail
cd "$(dirname "$0")/.."
rows="${ROWS:-2000000}"
limit="${LIMIT:-100MiB}"
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
go build -o "$tmp/quern" ./cmd/quern
go run ./bench/gentable -rows "$rows" -out "$tmp/big.csv"
ls -l "$tmp/big.csv" | awk -v l="$limit" '{printf "file %.0f MiB, GOMEMLIMIT %s\n", $5/1048576, l}'
flags="-hidden 64 -latent 4 -epochs 3 -val 0.1 -folds 0 -seed 7"
for run in 1 2; do
  GOMEMLIMIT="$limit" /usr/bin/time -f "streamed run $run: wall %e s, peak RSS %M KB" \
    "$tmp/quern" train -data "$tmp/big.csv" -stream $flags -out "$tmp/s$run.qm" 2>&1 | grep -E "^wrote|^time:|peak RSS|^threshold"
done
cmp "$tmp/s1.qm" "$tmp/s2.qm" && echo "the two streamed runs wrote the same model file, byte for byte"
GOMEMLIMIT="$limit" /usr/bin/time -f "streamed, parsing the file every pass (-cache none): wall %e s, peak RSS %M KB" \
  "$tmp/quern" train -data "$tmp/big.csv" -stream -cache none $flags -out "$tmp/s3.qm" 2>&1 | grep -E "^wrote|^time:|peak RSS|^threshold"
/usr/bin/time -f "in memory (no limit): wall %e s, peak RSS %M KB" \
  "$tmp/quern" train -data "$tmp/big.csv" $flags -out "$tmp/m.qm" 2>&1 | grep -E "^wrote|^time:|peak RSS|^threshold"
