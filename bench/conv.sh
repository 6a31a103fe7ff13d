#!/usr/bin/env bash
# Convolutions against dense layers on Fashion-MNIST (Debian's
# dataset-fashion-mnist), through the built command line and the GAN
# example, each pair with the same epochs, batch and optimiser:
#   vae  the 784-400-20 dense VAE against a VAE with two stride-2
#        convolutions of 32 and 64 channels, their transposes and a latent
#        of 20 (-channels 32,64 -latent 20): test negative ELBO (16 draws a
#        row, the 10,000 test images; lower is better), parameters, and the
#        training's wall time
#   gan  examples/fashion-gan dense against -channels 32,64: the Fréchet
#        distance of 10,000 samples to the test images on the features of
#        the example's autoencoder (lower is better)
#   bash bench/conv.sh                          # both, 10 VAE epochs, 20 GAN epochs
#   PARTS=vae EPOCHS=5 SEED=2 bash bench/conv.sh
#   FASHION_MNIST=DIR bash bench/conv.sh       # the data set in DIR
# Fetches Fashion-MNIST into a temporary folder when it is not installed
# (apt-get download, nothing installed).
set -euo pipefail
cd "$(dirname "$0")/.."
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
PARTS="${PARTS:-vae gan}"
EPOCHS="${EPOCHS:-10}"
GAN_EPOCHS="${GAN_EPOCHS:-20}"
SEED="${SEED:-1}"
fm="${FASHION_MNIST:-/usr/share/datasets/fashion-mnist}"
if ! [ -e "$fm/train-images-idx3-ubyte.gz" ]; then
	(cd "$tmp" && apt-get download dataset-fashion-mnist >/dev/null 2>&1 && dpkg -x dataset-fashion-mnist*.deb fm)
	fm="$tmp/fm/usr/share/datasets/fashion-mnist"
fi
go build -o "$tmp/quern" ./cmd/quern
q="$tmp/quern"
echo "quern $(git rev-parse --short HEAD), $(date -u +%Y-%m-%d), $(nproc) cores; other load: $(cut -d' ' -f1-3 /proc/loadavg) (1, 5, 15 min averages)"
case " $PARTS " in *" vae "*)
	printf '%-6s %-28s %10s %10s %9s\n' model layers parameters test_nelbo train_s
	for v in dense conv; do
		flags=(-hidden 400 -latent 20)
		what="784-400-20"
		if [ "$v" = conv ]; then flags=(-channels 32,64 -latent 20); what="conv 32,64 / latent 20"; fi
		/usr/bin/time -f "%e" -o "$tmp/t.txt" "$q" train -kind vae -data "$fm/train-images-idx3-ubyte.gz" "${flags[@]}" -epochs "$EPOCHS" -batch 128 -rate 0.001 \
			-val 0.1 -seed "$SEED" -quiet -out "$tmp/$v.qm" 2> "$tmp/err.txt" || { cat "$tmp/err.txt"; exit 1; }
		"$q" score -model "$tmp/$v.qm" -data "$fm/t10k-images-idx3-ubyte.gz" -out "$tmp/$v.csv" 2> /dev/null
		p=$("$q" inspect "$tmp/$v.qm" | awk '$1=="parameters" {print $2}')
		s=$(awk -F, 'NR>1 {s+=$2; n++} END {printf "%.3f", s/n}' "$tmp/$v.csv")
		printf '%-6s %-28s %10s %10s %9s\n' vae "$what" "$p" "$s" "$(cat "$tmp/t.txt")"
	done ;;
esac
case " $PARTS " in *" gan "*)
	for v in dense conv; do
		flags=()
		if [ "$v" = conv ]; then flags=(-channels 32,64); fi
		echo "gan $v (${GAN_EPOCHS} epochs):"
		go run ./examples/fashion-gan -train "$fm/train-images-idx3-ubyte.gz" -test "$fm/t10k-images-idx3-ubyte.gz" -epochs "$GAN_EPOCHS" \
			-out "$tmp/gan-$v" "${flags[@]}" | sed 's/^/  /'
	done ;;
esac
