#!/usr/bin/env bash
# B1 (issue 7): `closeout status` on 1 M and 10 M rows, beside `wc -l` on the same
# file in the same run. Wall time (median of RUNS runs), MB/s, rows/s, peak RSS (the
# largest of the runs), with the id column and without it.
#
#   bash benches/batch.sh                 # 1 M and 10 M rows, 5 runs each
#   ROWS="1000000" RUNS=3 bash benches/batch.sh
#   BIN=/path/to/other/closeout bash benches/batch.sh   # time another build
#   GAP=0 bash benches/batch.sh           # runs back to back (default: 3 s apart)
#
# Needs GNU time (/usr/bin/time; Debian package `time`). The files are the demo's
# invented study (`closeout demo --write N`: about 86 bytes a row, 10 columns, 24
# cells, 3 measures, ids and times, 0.1 % malformed rows and 0.1 % repeated ids),
# written once under target/bench-data/demo-N/ and kept there, with a copy of its
# study file without the id column; each file is read once before timing so the
# figures are for a warm page cache. Then RUNS pairs of runs on the largest file
# (`wc -l`, then `status` with ids) give the ratio the target names, each at one
# moment. Each run starts GAP seconds after the one before,
# as a supervisor re-opens the dashboard: on the project's virtual machines a run
# started at once is given memory the run before freed, which is quicker to give
# than memory freed seconds before (see DEVELOPERS.md, "Reading fast").
set -euo pipefail
cd "$(dirname "$0")/.."
ROWS=${ROWS:-"1000000 10000000"}
RUNS=${RUNS:-5}
GAP=${GAP:-3}
DATA=${DATA:-target/bench-data}
TIME=/usr/bin/time
[ -x "$TIME" ] || { echo "needs GNU time: apt-get install time" >&2; exit 2; }

cargo build --release --locked --quiet
GEN=target/release/closeout
BIN=${BIN:-$GEN}
for n in $ROWS; do
  dir="$DATA/demo-$n"
  if [ ! -f "$dir/responses.csv" ] || [ ! -f "$dir/study.toml" ]; then
    rm -rf "$dir"
    "$GEN" demo --write "$n" --dir "$dir" >/dev/null
  fi
  grep -v '^id = ' "$dir/study.toml" >"$dir/study-no-ids.toml"
done

# median of numbers on stdin
median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }

# time_runs CMD...: prints "median_seconds max_rss_kib". The wall time is taken to the
# millisecond around the command (GNU time's own is to the hundredth, 7 % of `wc -l`'s
# 0.07 s); GNU time gives the peak memory.
time_runs() {
  local secs=() rss=()
  for _ in $(seq "$RUNS"); do
    local start end
    sleep "$GAP"
    start=$(date +%s%N)
    $TIME -o "$DATA/time.out" -f "%M" "$@" >/dev/null 2>"$DATA/stderr.out" \
      || { echo "failed: $* ($(head -c 300 "$DATA/stderr.out"))" >&2; exit 1; }
    end=$(date +%s%N)
    secs+=("$(awk -v a="$start" -v b="$end" 'BEGIN { printf "%.3f", (b - a) / 1e9 }')")
    rss+=("$(tail -1 "$DATA/time.out")")
  done
  printf '%s\n' "${secs[@]}" | median | tr '\n' ' '
  printf '%s\n' "${rss[@]}" | sort -g | tail -1
}

printf '%-10s %-22s %8s %9s %11s %9s\n' rows what seconds "MB/s" "rows/s" "peak MiB"
for n in $ROWS; do
  dir="$DATA/demo-$n"
  csv="$dir/responses.csv"
  bytes=$(stat -c %s "$csv")
  cat "$csv" >/dev/null  # warm the page cache
  for what in "wc -l" "status, ids" "status, no ids"; do
    case "$what" in
      "wc -l") read -r s k < <(time_runs wc -l "$csv") ;;
      "status, ids") read -r s k < <(time_runs "$BIN" status "$dir/study.toml" --as-of 2026-03-10T00:00:00Z) ;;
      "status, no ids") read -r s k < <(time_runs "$BIN" status "$dir/study-no-ids.toml" --as-of 2026-03-10T00:00:00Z) ;;
    esac
    awk -v n="$n" -v w="$what" -v s="$s" -v k="$k" -v b="$bytes" 'BEGIN {
      t = (s > 0.005 ? s : 0.005);
      printf "%-10s %-22s %8.3f %9.0f %11.0f %9.1f\n", n, w, s, b / t / 1e6, n / t, k / 1024 }'
  done
done
# The target is a ratio to `wc -l`, whose own time moves with the host from hour to
# hour: pairs of runs (`wc -l`, then `status` with ids, each GAP seconds after the run
# before) give the ratio at one moment. RUNS pairs, on the largest file only (the
# target's 10 M rows; `wc -l` on 1 M rows takes a few milliseconds).
n=$(printf '%s\n' $ROWS | sort -g | tail -1)
dir="$DATA/demo-$n"
ratios=()
for _ in $(seq "$RUNS"); do
  read -r w _ < <(RUNS=1 time_runs wc -l "$dir/responses.csv")
  read -r s _ < <(RUNS=1 time_runs "$BIN" status "$dir/study.toml" --as-of 2026-03-10T00:00:00Z)
  ratios+=("$(awk -v s="$s" -v w="$w" 'BEGIN { printf "%.1f", s / (w > 0.005 ? w : 0.005) }')")
done
printf '%-10s status with ids / wc -l, paired: %s(median %s; the target: at most 10)\n' \
  "$n" "$(printf '%s\n' "${ratios[@]}" | sort -g | tr '\n' ' ')" \
  "$(printf '%s\n' "${ratios[@]}" | median)"
echo "machine: $(nproc) cores, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //'), $(date -u +%Y-%m-%d)"
