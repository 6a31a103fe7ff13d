#!/usr/bin/env bash
# Whole-job benchmark: the job a user runs, through the built quern
# command line, whole processes, side by side with the peer doing the
# same job in one script (bench/peer_job.py, Debian's python3-torch on
# OpenBLAS), at 1 and 2 threads. Jobs:
#   vae1, vae10   the 784-400-20 VAE on Fashion-MNIST's 60,000 training
#                 images, 1 and 10 epochs, 10% held out for validation
#                 and the threshold; score the 10,000 test images; encode
#                 every training image; draw 10,000 samples
#   ae1, ae10     the 784-128-32-128-784 autoencoder, the same (no samples)
#   table5        an autoencoder 32-16-4-16-32 on a generated CSV of
#                 TABLE_ROWS rows (default 1,000,000) x 32 columns
#                 (bench/gentable, an invented cold store), 5 epochs, score
#                 and encode every row
# For each job and thread count it prints, for both sides, the wall time
# of each phase (load, train, calibrate, score, write, encode, sample),
# for the VAE jobs the test negative ELBO each side reached,
# their ratio (quern / peer), the whole job's wall time (the sum of
# quern's processes; the peer's one process) and peak RSS (the largest
# of quern's processes).
#   bash bench/job.sh                 # everything (about half an hour)
#   JOBS="vae1 table5" TABLE_ROWS=200000 bash bench/job.sh
#   FASHION_MNIST=DIR bash bench/job.sh   # the data set in DIR
# Needs Debian's python3-torch and python3-numpy; fetches Fashion-MNIST
# (dataset-fashion-mnist) and libopenblas0-pthread into a temporary
# folder when they are not installed (apt-get download, nothing
# installed).
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
JOBS="${JOBS:-vae1 vae10 ae1 ae10 table5}"
THREADS="${THREADS:-1 2}"
TABLE_ROWS="${TABLE_ROWS:-1000000}"
fm="${FASHION_MNIST:-/usr/share/datasets/fashion-mnist}"
if ! [ -e "$fm/train-images-idx3-ubyte.gz" ]; then
	(cd "$tmp" && apt-get download dataset-fashion-mnist >/dev/null 2>&1 && dpkg -x dataset-fashion-mnist*.deb fm)
	fm="$tmp/fm/usr/share/datasets/fashion-mnist"
fi
(cd "$tmp" && apt-get download libopenblas0-pthread >/dev/null 2>&1 && dpkg -x libopenblas0-pthread*.deb ob)
ob="$tmp/ob/usr/lib/x86_64-linux-gnu/openblas-pthread"
go build -o "$tmp/quern" ./cmd/quern
case " $JOBS " in *" table"*) go run ./bench/gentable -rows "$TABLE_ROWS" -out "$tmp/table.csv" ;; esac
q="$tmp/quern"
# timed PHASE-FILE CMD...: runs CMD with its wall time and peak RSS, then
# copies its closing "time:" line's phases into PHASE-FILE as "NAME SECONDS"
timed() {
	local pf="$1"; shift
	/usr/bin/time -f "process %e %M" -o "$tmp/time.txt" "$@" 2> "$tmp/err.txt" > /dev/null || { cat "$tmp/err.txt"; exit 1; }
	cat "$tmp/time.txt" >> "$pf"
	grep '^time: ' "$tmp/err.txt" | sed 's/^time: //; s/;.*//' | tr ',' '\n' | awk 'NF==2 {
		v=$2; s=1; if (v ~ /ms$/) {s=0.001; sub(/ms$/,"",v)} else if (v ~ /m[0-9]/) {split(v,a,"m"); sub(/s$/,"",a[2]); v=a[1]*60+a[2]} else sub(/s$/,"",v);
		if (v ~ /^</) v=0; print $1, v*s}' >> "$pf"
}
ours() { # job threads epochs: the job through the command line
	local job="$1" th="$2" ep="$3" pf="$tmp/ours.txt"
	: > "$pf"
	export GOMAXPROCS="$th"
	case "$job" in
	vae)
		timed "$pf" "$q" train -kind vae -data "$fm/train-images-idx3-ubyte.gz" -hidden 400 -latent 20 -epochs "$ep" -batch 128 -rate 0.001 -val 0.1 -out "$tmp/m.qm"
		timed "$pf" "$q" score -model "$tmp/m.qm" -data "$fm/t10k-images-idx3-ubyte.gz" -out "$tmp/scores.csv"
		timed "$pf" "$q" encode -model "$tmp/m.qm" -data "$fm/train-images-idx3-ubyte.gz" -out "$tmp/codes.csv"
		timed "$pf" "$q" sample -model "$tmp/m.qm" -n 10000 -out "$tmp/samples.csv" ;;
	ae)
		timed "$pf" "$q" train -kind ae -data "$fm/train-images-idx3-ubyte.gz" -hidden 128 -latent 32 -epochs "$ep" -batch 128 -rate 0.001 -val 0.1 -out "$tmp/m.qm"
		timed "$pf" "$q" score -model "$tmp/m.qm" -data "$fm/t10k-images-idx3-ubyte.gz" -out "$tmp/scores.csv"
		timed "$pf" "$q" encode -model "$tmp/m.qm" -data "$fm/train-images-idx3-ubyte.gz" -out "$tmp/codes.csv" ;;
	table)
		timed "$pf" "$q" train -kind ae -data "$tmp/table.csv" -hidden 16 -latent 4 -epochs "$ep" -batch 128 -rate 0.001 -val 0.1 -out "$tmp/m.qm"
		timed "$pf" "$q" score -model "$tmp/m.qm" -data "$tmp/table.csv" -out "$tmp/scores.csv"
		timed "$pf" "$q" encode -model "$tmp/m.qm" -data "$tmp/table.csv" -out "$tmp/codes.csv" ;;
	esac
	unset GOMAXPROCS
}
peer() { # job threads epochs: the job in one script
	local job="$1" th="$2" ep="$3" pf="$tmp/peer.txt" tr te
	tr="$fm/train-images-idx3-ubyte.gz" te="$fm/t10k-images-idx3-ubyte.gz"
	if [ "$job" = table ]; then tr="$tmp/table.csv" te="$tmp/table.csv"; fi
	/usr/bin/time -f "process %e %M" -o "$tmp/time.txt" env LD_LIBRARY_PATH="$ob" OPENBLAS_NUM_THREADS="$th" OMP_NUM_THREADS="$th" \
		/usr/bin/python3 bench/peer_job.py "$job" "$th" "$ep" "$tr" "$te" "$tmp/peer" > "$tmp/peer_out.txt" 2> "$tmp/peer_err.txt" || { cat "$tmp/peer_err.txt"; exit 1; }
	{ cat "$tmp/time.txt"; awk '$1=="phase" {print $2, $3}' "$tmp/peer_out.txt"; } > "$pf"
}
echo "quern $(git rev-parse --short HEAD), $(date -u +%Y-%m-%d), $(nproc) cores; other load: $(cut -d' ' -f1-3 /proc/loadavg) (1, 5, 15 min averages)"
printf '%-7s %3s  %-9s %9s %9s %7s\n' job thr phase quern_s peer_s ratio
for th in $THREADS; do
	for j in $JOBS; do
		job="${j%%[0-9]*}" ep="${j#$job}"
		ours "$job" "$th" "$ep"
		peer "$job" "$th" "$ep"
		awk -v j="$j" -v t="$th" '
			FNR==1 {f++}
			$1=="process" {wall[f]+=$2; if ($3>rss[f]) rss[f]=$3; next}
			{n=$1; if (n=="open") n="load"; v[f, n]+=$2; if (!(n in seen)) {seen[n]=1; order[++k]=n}}
			END {
				for (i=1; i<=k; i++) { n=order[i]; a=v[1, n]; b=v[2, n]; printf "%-7s %3d  %-9s %9.2f %9.2f %7s\n", j, t, n, a, b, (b>0 ? sprintf("%.2f", a/b) : "-") }
				printf "%-7s %3d  %-9s %9.2f %9.2f %7.2f\n", j, t, "job", wall[1], wall[2], wall[1]/wall[2]
				printf "%-7s %3d  %-9s %9.0f %9.0f %7.2f\n", j, t, "peak_MB", rss[1]/1024, rss[2]/1024, rss[1]/rss[2]
			}' "$tmp/ours.txt" "$tmp/peer.txt"
		if [ "$job" = vae ]; then
			# the model's quality: the mean test score, the negative ELBO
			# with 16 draws a row, in nats per image (lower is better)
			a=$(awk -F, 'NR>1 {s+=$2; n++} END {printf "%.3f", s/n}' "$tmp/scores.csv")
			b=$(awk -F, 'NR>1 {s+=$2; n++} END {printf "%.3f", s/n}' "$tmp/peer-scores.csv")
			printf '%-7s %3d  %-9s %9s %9s %7s\n' "$j" "$th" test_nelbo "$a" "$b" "$(awk -v a="$a" -v b="$b" 'BEGIN {printf "%.4f", a/b}')"
		fi
	done
done
