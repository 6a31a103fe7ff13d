#!/usr/bin/env bash
# Fetches the full open data sets the tests use subsets of, from Debian's
# packages, without installing anything: dataset-fashion-mnist (MIT) and the
# CSV sets inside python3-sklearn (BSD-3; original sources UCI).
#   scripts/fetch-data.sh [DIR]     (default: .data)
# Afterwards DIR/fashion-mnist holds the four idx .gz files and DIR/sklearn
# holds digits.csv.gz and breast_cancer.csv.
set -euo pipefail
dir="${1:-.data}"
mkdir -p "$dir"
dir="$(cd "$dir" && pwd)"
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
cd "$tmp"
apt-get download dataset-fashion-mnist python3-sklearn
for f in *.deb; do dpkg -x "$f" x; done
mkdir -p "$dir/fashion-mnist" "$dir/sklearn"
cp x/usr/share/datasets/fashion-mnist/*.gz "$dir/fashion-mnist/"
cp x/usr/lib/python3/dist-packages/sklearn/datasets/data/{digits.csv.gz,breast_cancer.csv} "$dir/sklearn/"
echo "b0564c3eedabfbf835052cff8503ea422014ce006caf5b757f851416ee8300c7  $dir/fashion-mnist/train-images-idx3-ubyte.gz" | sha256sum -c -
echo "data in $dir"
