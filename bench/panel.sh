#!/usr/bin/env bash
# The open anomaly panel (scripts/panel/panel.py says which sets, the
# protocol and the baselines): quern at its defaults, trained and scored
# through the built command line on every task, against PCA reconstruction
# (k=3 and k for 90% of the variance) and the shrunk-covariance z-distance
# computed by numpy in the same run. Prints the per-set table the README
# quotes; DIR/results.csv keeps every task.
#   bash bench/panel.sh                  # every set (about a minute on 2 cores)
#   SETS=wine,iris bash bench/panel.sh   # some of them
#   OUT=DIR bash bench/panel.sh          # keep the tasks and scores in DIR
#   TRAIN_FLAGS="-latent 4" bash bench/panel.sh   # something other than the defaults
#   QUERN=/tmp/quern-old bash bench/panel.sh       # a binary built elsewhere (A/B runs)
# Needs Debian's python3-numpy, python3-scipy and python3-rdata; fetches python3-sklearn
# and r-cran-mlbench into a temporary folder (apt-get download, nothing
# installed) when they are not installed.
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
out="${OUT:-$tmp/panel}"
skl=/usr/lib/python3/dist-packages/sklearn/datasets/data
mlb=/usr/lib/R/site-library/mlbench/data
if ! [ -e "$skl/wine_data.csv" ]; then
	(cd "$tmp" && apt-get download python3-sklearn >/dev/null 2>&1 && dpkg -x python3-sklearn_*.deb skl)
	skl="$tmp/skl/usr/lib/python3/dist-packages/sklearn/datasets/data"
fi
if ! [ -e "$mlb/Sonar.rda" ]; then
	(cd "$tmp" && apt-get download r-cran-mlbench >/dev/null 2>&1 && dpkg -x r-cran-mlbench_*.deb mlb)
	mlb="$tmp/mlb/usr/lib/R/site-library/mlbench/data"
fi
if [ -n "${QUERN:-}" ]; then
	cp "$QUERN" "$tmp/quern"
else
	go build -o "$tmp/quern" ./cmd/quern
fi
/usr/bin/python3 scripts/panel/panel.py prepare --sklearn "$skl" --mlbench "$mlb" --out "$out" ${SETS:+--sets "$SETS"} 2>/dev/null
start=$(date +%s)
tail -n +2 "$out/tasks.csv" | cut -d, -f1 | while read -r task; do
	d="$out/$task"
	# shellcheck disable=SC2086
	# shellcheck disable=SC2046
	"$tmp/quern" train -data "$d/train.csv" -out "$d/m.qm" -quiet ${TRAIN_FLAGS:-} $(cat "$d/flags.txt" 2>/dev/null) 2> "$d/train.log" || { cat "$d/train.log"; exit 1; }
	"$tmp/quern" score -model "$d/m.qm" -data "$d/test.csv" -keep truth -top 0 -out "$d/scores.csv" -quiet
	"$tmp/quern" inspect "$d/m.qm" | sed -n 's/^threshold .*below \([0-9.]*\)% with.*/\1/p' | awk '{print $1/100}' > "$d/bound.txt"
done
echo "quern: $(( $(date +%s) - start )) s for every task's train, score and inspect; commit $(git rev-parse --short HEAD)"
/usr/bin/python3 scripts/panel/panel.py collect --out "$out"
