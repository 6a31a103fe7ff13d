#!/usr/bin/env bash
# Serving benchmark: quern's graph-free autoencoder scoring against the
# peer (bench/peer_serve.py), side by side on this machine, one thread each.
#   bash bench/serve.sh
# Needs Debian's python3-torch; fetches libopenblas0-pthread into a
# temporary folder for the peer (apt-get download, nothing installed).
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
(cd "$tmp" && apt-get download libopenblas0-pthread >/dev/null && dpkg -x libopenblas0-pthread*.deb ob)
export OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1
ours="$(GOMAXPROCS=1 go test -run '^$' -bench 'BenchmarkScore' -benchtime 3s ./ae/)"
peer="$(LD_LIBRARY_PATH="$tmp/ob/usr/lib/x86_64-linux-gnu/openblas-pthread" /usr/bin/python3 bench/peer_serve.py)"
echo "$ours" | grep Benchmark
echo "$peer"
p50=$(echo "$ours" | awk '/ScoreOneRow/ {for(i=1;i<=NF;i++) if($i=="p50-us") print $(i-1)}')
p99=$(echo "$ours" | awk '/ScoreOneRow/ {for(i=1;i<=NF;i++) if($i=="p99-us") print $(i-1)}')
rps=$(echo "$ours" | awk '$1 ~ /ScoreBatch(-[0-9]+)?$/ {for(i=1;i<=NF;i++) if($i=="rows/s") print $(i-1)}')
pp50=$(echo "$peer" | awk '/p50/ {print $2}')
pp99=$(echo "$peer" | awk '/p99/ {print $2}')
prps=$(echo "$peer" | awk '/rows_per_s/ {print $2}')
printf '\n%-24s %12s %12s %8s\n' measure quern peer ratio
awk -v a="$p50" -v b="$pp50" 'BEGIN{printf "%-24s %12.2f %12.2f %8.3f\n", "single row p50 (us)", a, b, a/b}'
awk -v a="$p99" -v b="$pp99" 'BEGIN{printf "%-24s %12.2f %12.2f %8.3f\n", "single row p99 (us)", a, b, a/b}'
awk -v a="$rps" -v b="$prps" 'BEGIN{printf "%-24s %12.0f %12.0f %8.3f\n", "batch rows/s", a, b, a/b}'
