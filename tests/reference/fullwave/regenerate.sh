#!/usr/bin/env bash
# Regenerates the stored full-wave reference results in this folder (openEMS on 2 threads; minutes each, see
# README.md here).  Run from the repository root: bash tests/reference/fullwave/regenerate.sh
set -euo pipefail
cd "$(dirname "$0")/../../.."
here=tests/reference/fullwave
ebglayout fullwave "$here/hx2_l0_straight3_lossless.toml" --out "$here" --preset default --threads 2 --force
for case in lossy patch40 h020 stagger4; do
    ebglayout fullwave "$here/hx2_l0_straight3_$case.toml" --out "$here" --preset default --threads 2 --force
done
ebglayout fullwave samples/hx2_l2_tx_bridged.toml --out "$here" --preset default --threads 2 --force
