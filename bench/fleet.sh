#!/usr/bin/env bash
# Fleet benchmarks (invented chains of cold stores, bench/gentable -stores):
#  1. training 1,000 stores x 1,000 rows (34 sensor columns) into a fleet of
#     autoencoders 34-16-4-16-34, whole process at 1 and at 2 threads;
#  2. a fleet of 10,000 such models in one quern serve against a server of
#     one of them: resident memory per model, and single-record score
#     latency from 4 keep-alive clients (bench/fleetload).
#   bash bench/fleet.sh            (about 3 minutes on 2 cores; ~1 GB in a temporary folder)
# Uses farm-bench when it is on PATH (median of 5 paired runs), else one
# /usr/bin/time run each.
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'kill $(jobs -p) 2>/dev/null || true; rm -rf "$tmp"' EXIT
go build -o "$tmp/quern" ./cmd/quern
go build -o "$tmp/fleetload" ./bench/fleetload
go run ./bench/gentable -stores 1000 -sensors 34 -rows 1000000 -out "$tmp/fleet.csv"
go run ./bench/gentable -stores 10000 -sensors 34 -rows 2000000 -out "$tmp/fleet10k.csv"
flags="-group store -hidden 16 -latent 4 -epochs 5 -folds 0 -quiet"

echo "== 1. training 1000 stores x 1000 rows: 2 threads (A) against 1 thread (B)"
if command -v farm-bench >/dev/null; then
  farm-bench -n 5 --timeout 600 \
    --vs "sh -c 'rm -rf $tmp/b1 && exec env GOMAXPROCS=1 $tmp/quern train -data $tmp/fleet.csv $flags -out $tmp/b1'" \
    -- sh -c "rm -rf $tmp/b2 && exec env GOMAXPROCS=2 $tmp/quern train -data $tmp/fleet.csv $flags -out $tmp/b2"
else
  for p in 2 1; do
    rm -rf "$tmp/b$p"
    GOMAXPROCS=$p /usr/bin/time -f "$p threads: wall %e s, peak %M KB" "$tmp/quern" train -data "$tmp/fleet.csv" $flags -out "$tmp/b$p"
  done
fi
GOMAXPROCS=2 "$tmp/quern" train -data "$tmp/fleet.csv" ${flags/-quiet/} -out "$tmp/b2" 2>&1 | tail -1
cmp "$tmp/b2/fleet.json" "$tmp/b1/fleet.json" && echo "the fleets trained at 1 and 2 threads have the same index (and so the same model files)"

echo "== 2. 10,000 models in one server"
GOMAXPROCS=2 "$tmp/quern" train -data "$tmp/fleet10k.csv" ${flags/-quiet/} -out "$tmp/f10k" 2>&1 | tail -1
go run ./bench/fleetmem "$tmp/f10k"
one="$(ls "$tmp"/f10k/g-store0001-*.qm)"
serve() { # ADDR ARGS...: start a server, wait until ready, print its pid
  local addr=$1; shift
  GOMAXPROCS=2 "$tmp/quern" serve -addr "$addr" "$@" >/dev/null 2>&1 &
  local pid=$!
  for _ in $(seq 1 240); do curl -sf "http://$addr/readyz" >/dev/null && break; sleep 0.5; done
  echo $pid
}
t0=$(date +%s.%N)
fpid=$(serve 127.0.0.1:8611 -fleet "$tmp/f10k")
t1=$(date +%s.%N)
echo "fleet server ready in $(echo "$t1 - $t0" | bc) s"
echo "fleet of 10,000 (+ shared):"
"$tmp/fleetload" -url http://127.0.0.1:8611 -data "$tmp/fleet10k.csv" -pid "$fpid" | tee "$tmp/fleet.out"
kill "$fpid"; wait "$fpid" 2>/dev/null || true
opid=$(serve 127.0.0.1:8612 -model "$one")
echo "one model:"
"$tmp/fleetload" -url http://127.0.0.1:8612 -data "$tmp/fleet10k.csv" -pid "$opid" | tee "$tmp/one.out"
kill "$opid"; wait "$opid" 2>/dev/null || true
awk 'FNR==1 && NR==1 {for(i=1;i<=NF;i++) if($i=="p99-us") fp=$(i+1)}
     FNR==2 && NR==2 {for(i=1;i<=NF;i++) if($i=="peak-rss-kb") fr=$(i+1)}
     FNR==1 && NR==3 {for(i=1;i<=NF;i++) if($i=="p99-us") op=$(i+1)}
     FNR==2 && NR==4 {for(i=1;i<=NF;i++) if($i=="peak-rss-kb") or=$(i+1)}
     END {printf "p99 fleet/one %.2f; peak RSS per model %.1f KB ((fleet - one) / 10001)\n", fp/op, (fr-or)/10001}' "$tmp/fleet.out" "$tmp/one.out"
