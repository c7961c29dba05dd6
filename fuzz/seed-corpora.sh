#!/bin/sh
# Fill fuzz/corpus/<target>/ with seeds taken from the repository's own
# files (captures, recordings, graphs, manifests, scenarios) and the inputs
# fuzzing found before (tests/bad_inputs/fuzz/<target>/). Run from fuzz/.
set -eu
root=..
seed() { mkdir -p "corpus/$1"; cp "$2" "corpus/$1/$(basename "$2")" 2>/dev/null || true; }
for f in $root/tests/fixtures/captures/*.wav $root/tests/fixtures/bad/*.wav $root/tests/bad_inputs/cases/*.wav; do
  seed wav_reader "$f"
done
for f in $root/samples/*.wav; do
  mkdir -p corpus/wav_reader; head -c 4096 "$f" > "corpus/wav_reader/head-$(basename "$f")"
done
for f in $root/samples/*.sigmf-meta $root/tests/fixtures/captures/*.sigmf-meta $root/tests/fixtures/bad/*.sigmf-meta; do
  seed sigmf_meta "$f"
done
mkdir -p corpus/raw_datatypes
i=0
for f in $root/tests/fixtures/captures/dongle.cu8 $root/tests/fixtures/bad/nan.cf32_le $root/tests/fixtures/bad/odd.ci16 $root/tests/fixtures/writer_input.f32; do
  for dt in 0 3 6 8; do
    { printf "\\$(printf %03o $dt)\\002"; head -c 2048 "$f"; } > "corpus/raw_datatypes/seed-$i"
    i=$((i + 1))
  done
done
for f in $root/graphs/*.yaml $root/graphs/parts/*.yaml; do seed graph_load "$f"; done
for f in $root/samples/*.check.yaml; do seed manifest "$f"; done
for f in $root/samples/*.scenario.yaml; do seed scenario "$f"; done
for t in wav_reader sigmf_meta raw_datatypes graph_load manifest scenario; do
  for f in $root/tests/bad_inputs/fuzz/$t/*; do [ -f "$f" ] && seed "$t" "$f"; done
done
ls corpus | while read -r t; do echo "$t: $(ls "corpus/$t" | wc -l) seeds"; done
