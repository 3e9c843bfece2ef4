#!/usr/bin/env bash
# Runs one libFuzzer target for a bounded time, starting from its seed corpus.
# usage: run_fuzz_target.sh TARGET SEED_DIR WORK_DIR SECONDS [libFuzzer flags...]
# New inputs go to WORK_DIR/corpus (the seeds in the source tree are never
# written to); a crashing, leaking or hanging input is saved in
# WORK_DIR/artifacts and can be replayed with `TARGET FILE`.
set -euo pipefail
target=$1 seeds=$2 work=$3 seconds=$4
shift 4
mkdir -p "$work/corpus" "$work/artifacts"
# -close_fd_mask=3 silences the code under test (htslib reports every bad
# record on stderr); libFuzzer and the sanitizers still print their reports.
exec "$target" -max_total_time="$seconds" -timeout=10 -rss_limit_mb=2048 -max_len=4096 \
  -print_final_stats=1 -close_fd_mask=3 -artifact_prefix="$work/artifacts/" "$@" "$work/corpus" "$seeds"
