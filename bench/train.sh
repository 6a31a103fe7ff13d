#!/usr/bin/env bash
# Training benchmark: quern's training steps for the reference shapes
# against the peer (bench/peer_train.py), interleaved on this machine at 1
# and 2 threads, printing samples/s, the ratio of epoch times (quern/peer),
# GFLOP/s against each side's measured 1024x1024 Sgemm rate, and peak RSS.
# Each side's figure is the best of three timed runs.
# OpenBLAS 0.3.21 does not know recent AMD CPUs (Zen 5 here) and falls back
# to its 8-lane Haswell kernels; where the CPU has AVX-512 the script also
# runs the peer with OPENBLAS_CORETYPE=SkylakeX (its AVX-512 kernels) and
# reports that ratio too (ratio512), and the same for quern's -tags
# openblas build.
#   bash bench/train.sh
# Needs Debian's python3-torch; fetches libopenblas0-pthread into a
# temporary folder (apt-get download, nothing installed).
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
(cd "$tmp" && apt-get download libopenblas0-pthread >/dev/null 2>&1 && dpkg -x libopenblas0-pthread*.deb ob)
ob="$tmp/ob/usr/lib/x86_64-linux-gnu/openblas-pthread"
go test -c -o "$tmp/train.test" ./train/ && go test -c -o "$tmp/engine.test" ./internal/engine/
# the optional cgo build on OpenBLAS (needs Debian's libopenblas-dev)
have_ob=0
if go test -tags openblas -c -o "$tmp/train_ob.test" ./train/ 2>/dev/null; then have_ob=1; fi
avx512=0
if grep -qw avx512f /proc/cpuinfo; then avx512=1; fi
ours() { # threads binary pattern: three runs of each benchmark, the best kept by metric()
	/usr/bin/time -f "rss_kb %M" env GOMAXPROCS="$1" "$tmp/$2" -test.run '^$' -test.bench "$3" -test.benchtime 20x -test.count 3 2>&1
}
for th in 1 2; do
	{
		ours "$th" train.test TrainStepVAE784
		ours "$th" train.test 'TrainStep(AE784|Tiny)'
		ours "$th" train.test TrainStepGAN784
		ours "$th" train.test TrainStepConvVAE
		ours "$th" engine.test 'Sgemm1024$'
	} > "$tmp/ours$th.txt"
	/usr/bin/time -f "rss_kb %M" env LD_LIBRARY_PATH="$ob" OPENBLAS_NUM_THREADS="$th" OMP_NUM_THREADS="$th" /usr/bin/python3 bench/peer_train.py "$th" > "$tmp/peer$th.txt" 2>&1
	if [ "$avx512" = 1 ]; then
		env LD_LIBRARY_PATH="$ob" OPENBLAS_CORETYPE=SkylakeX OPENBLAS_NUM_THREADS="$th" OMP_NUM_THREADS="$th" /usr/bin/python3 bench/peer_train.py "$th" > "$tmp/peer512_$th.txt" 2>&1
	fi
done
metric() { # file benchmark unit: the largest value over the runs
	awk -v b="$2" -v u="$3" '$1 ~ b {for(i=1;i<=NF;i++) if($i==u) print $(i-1)}' "$1" | sort -g | tail -1
}
printf '%-8s %3s %14s %14s %8s %10s %10s %14s %8s\n' shape thr quern_samp/s peer_samp/s ratio quern_GF/s peer_GF/s peer512_samp/s ratio512
for th in 1 2; do
	for s in vae784:TrainStepVAE784 ae784:TrainStepAE784 gan784:TrainStepGAN784 tiny:TrainStepTiny convvae:TrainStepConvVAE; do
		name=${s%%:*}; bench=${s#*:}
		q=$(metric "$tmp/ours$th.txt" "$bench" samples/s); qg=$(metric "$tmp/ours$th.txt" "$bench" GFLOP/s)
		p=$(awk -v n="$name" '$1==n {print $2}' "$tmp/peer$th.txt"); pg=$(awk -v n="$name" '$1==n {print $3}' "$tmp/peer$th.txt")
		p5=0
		if [ "$avx512" = 1 ]; then p5=$(awk -v n="$name" '$1==n {print $2}' "$tmp/peer512_$th.txt"); fi
		awk -v n="$name" -v t="$th" -v q="$q" -v p="$p" -v qg="$qg" -v pg="$pg" -v p5="$p5" 'BEGIN{printf "%-8s %3d %14.0f %14.0f %8.2f %10.2f %10.2f", n, t, q, p, p/q, qg, pg; if (p5 > 0) printf " %14.0f %8.2f", p5, p5/q; printf "\n"}'
	done
	qs=$(metric "$tmp/ours$th.txt" Sgemm1024 GFLOP/s); ps=$(awk '$1=="sgemm1024" {print $3}' "$tmp/peer$th.txt")
	ps5=-
	if [ "$avx512" = 1 ]; then ps5=$(awk '$1=="sgemm1024" {print $3}' "$tmp/peer512_$th.txt"); fi
	printf '%-8s %3d %14s %14s %8s %10.2f %10.2f %14s\n' sgemm "$th" - - - "$qs" "$ps" "peer512 $ps5"
	printf 'peak RSS, %d thread(s): quern %s kB (largest benchmark), peer %s kB\n' "$th" \
		"$(grep rss_kb "$tmp/ours$th.txt" | awk '{print $2}' | sort -n | tail -1)" "$(grep rss_kb "$tmp/peer$th.txt" | awk '{print $2}')"
done
echo "ratio = quern epoch time / peer epoch time (below 1: quern is faster); ratio512 against the peer on OpenBLAS's AVX-512 kernels"
if [ "$have_ob" = 1 ]; then
	echo
	echo "quern's own build against its -tags openblas build, 1 thread (samples/s):"
	for s in train:TrainStepVAE784 train:TrainStepAE784 train:TrainStepGAN784; do
		pkg=${s%%:*}; bench=${s#*:}
		d=$(GOMAXPROCS=1 "$tmp/$pkg.test" -test.run '^$' -test.bench "$bench" -test.benchtime 20x -test.count 3 | awk '{for(i=1;i<=NF;i++) if($i=="samples/s") print $(i-1)}' | sort -g | tail -1)
		o=$(GOMAXPROCS=1 OPENBLAS_NUM_THREADS=1 "$tmp/${pkg}_ob.test" -test.run '^$' -test.bench "$bench" -test.benchtime 20x -test.count 3 | awk '{for(i=1;i<=NF;i++) if($i=="samples/s") print $(i-1)}' | sort -g | tail -1)
		o5=0
		if [ "$avx512" = 1 ]; then
			o5=$(GOMAXPROCS=1 OPENBLAS_NUM_THREADS=1 OPENBLAS_CORETYPE=SkylakeX "$tmp/${pkg}_ob.test" -test.run '^$' -test.bench "$bench" -test.benchtime 20x -test.count 3 | awk '{for(i=1;i<=NF;i++) if($i=="samples/s") print $(i-1)}' | sort -g | tail -1)
		fi
		awk -v n="$bench" -v d="$d" -v o="$o" -v o5="$o5" 'BEGIN{printf "%-20s default %10.0f  openblas %10.0f  openblas/default %.2f", n, d, o, o/d; if (o5 > 0) printf "  openblas512 %10.0f  openblas512/default %.2f", o5, o5/d; printf "\n"}'
	done
fi
