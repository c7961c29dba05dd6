#!/bin/sh
# Run every fuzz target for SECONDS (default 600) one after another, at the
# lowest priority, continuing past crashes so one run finds all it can.
# Logs go to LOGDIR (default target/fuzz-logs); crashing inputs to
# artifacts/<target>/. Run from fuzz/ after ./seed-corpora.sh.
set -u
seconds=${SECONDS_EACH:-600}
logs=${LOGDIR:-target/fuzz-logs}
mkdir -p "$logs"
for t in ${TARGETS:-wav_reader sigmf_meta graph_load raw_datatypes scenario manifest}; do
  mkdir -p "corpus/$t" "artifacts/$t"
  nice -n 19 cargo +nightly fuzz run -s none -a "$t" "corpus/$t" -- \
    -max_total_time="$seconds" -rss_limit_mb=1024 -timeout=10 -max_len=65536 \
    -fork=1 -ignore_crashes=1 -ignore_timeouts=1 -ignore_ooms=1 \
    -artifact_prefix="artifacts/$t/" < /dev/null > "$logs/$t.log" 2>&1
  echo "$t: exit $?" >> "$logs/summary.txt"
done
