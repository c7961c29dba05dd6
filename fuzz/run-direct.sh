#!/bin/sh
# Run already-built fuzz targets (cargo fuzz build -s none -a) one after
# another at the lowest priority, SECONDS_EACH seconds each, continuing past
# crashes. Usage: TARGETS="a b" ./run-direct.sh   (from fuzz/)
set -u
seconds=${SECONDS_EACH:-600}
logs=${LOGDIR:-target/fuzz-logs}
bin=target/x86_64-unknown-linux-gnu/release
mkdir -p "$logs"
for t in $TARGETS; do
  mkdir -p "corpus/$t" "artifacts/$t"
  nice -n 19 "$bin/$t" "corpus/$t" -max_total_time="$seconds" -rss_limit_mb=1024 -timeout=10 -max_len=65536 \
    -fork=1 -ignore_crashes=1 -ignore_timeouts=1 -ignore_ooms=1 -artifact_prefix="artifacts/$t/" \
    < /dev/null > "$logs/$t.log" 2>&1
  echo "$t: exit $?" >> "$logs/summary.txt"
done
