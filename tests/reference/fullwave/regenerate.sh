#!/usr/bin/env bash
# Regenerates the stored full-wave reference results in this folder (openEMS on 2 threads; about 15 minutes in
# all, see README.md here).  Run from the repository root: bash tests/reference/fullwave/regenerate.sh
set -euo pipefail
cd "$(dirname "$0")/../../.."
here=tests/reference/fullwave
for case in lossless lossy patch40 h020 stagger4; do
    ebglayout fullwave "$here/hx2_l0_straight3_$case.toml" --out "$here" --preset default --threads 2 --force
done
for sample in hx2_l2_tx_bridged hx2_l3_rx_stripline; do
    ebglayout fullwave "samples/$sample.toml" --out "$here" --preset default --threads 2 --force
done
# the folded route runs on the full domain with four drives: about 5 minutes on one thread
ebglayout fullwave samples/hx2_l1_rx_folded.toml --out "$here" --preset default --threads 2 --force
