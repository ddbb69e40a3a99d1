#!/usr/bin/env bash
# Whole runs of `gripsweep run`, timed with GNU time (`/usr/bin/time -v`: wall time, CPU time,
# peak resident memory): the quick scenario and the weight-shift scenario at --threads 1 and
# --threads 2 (interleaved, REPEATS times each), and with RUN_DEFAULT=1 the default scenario once
# at --threads 2. Prints one line per run and, per scenario, the medians and the parallel
# efficiency t1 / (2 t2). BENCHMARKS.md ("Harness") has the figures and how to read them.
#
#   cargo build --release && cp target/release/gripsweep /tmp/bench-gripsweep
#   benches/run_bench.sh                  # quick + weight-shift, 1 and 2 threads, 3 repeats
#   RUN_DEFAULT=1 benches/run_bench.sh    # ... and the default scenario at 2 threads
#
# Environment: GRIPSWEEP_BIN (default /tmp/bench-gripsweep: a private copy, so that builds by
# others in target/ cannot swap the binary mid-benchmark), BENCH_OUT (default
# /tmp/gripsweep-bench: run folders and GNU time logs), REPEATS (default 3), SCENARIOS (default
# "quick weight-shift": names of files in scenarios/, or paths ending in .toml; empty: none).
# Needs GNU time (Debian: apt-get install time) and python3.
#
# Per run: cells = rows of cells.csv; sim s = cells × the scenario's duration (nominal) and the
# sum of the sim_time_s column (actual: a cell that falls or diverges stops early); cells/min
# and simulated seconds per wall second from the wall time of the whole command (robot loading,
# plan checks, the slip-floor probe, every cell, cells.csv, the report and plots); cell-wall sum
# = the sum of the per-cell wall times in timing.csv; outside cells = wall − cell-wall sum /
# threads (what is not spent inside a cell: probe, I/O, report, and threads waiting at the end);
# report s = a separate `gripsweep report DIR` on the finished folder; the load average
# (1 min) before and after each run, to judge contention on a shared machine. The runs' own
# summary lines go to BENCH_OUT/*.time.out; the table is also kept in BENCH_OUT/runs.tsv.
set -euo pipefail

ROOT=$(cd "$(dirname "$0")/.." && pwd)
BIN=${GRIPSWEEP_BIN:-/tmp/bench-gripsweep}
OUT=${BENCH_OUT:-/tmp/gripsweep-bench}
REPEATS=${REPEATS:-3}
SCENARIOS=${SCENARIOS-quick weight-shift}
TIME=/usr/bin/time

[ -x "$BIN" ] || { echo "run_bench.sh: no gripsweep binary at $BIN (see the header)" >&2; exit 2; }
"$TIME" -v true 2>/dev/null || { echo "run_bench.sh: GNU time missing at $TIME (apt-get install time)" >&2; exit 2; }
mkdir -p "$OUT"
RESULTS="$OUT/runs.tsv"
: >"$RESULTS"

load1() { cut -d' ' -f1 /proc/loadavg; }

# run NAME SCENARIO_ARG THREADS REPEAT
run() {
  local name=$1 scen=$2 threads=$3 rep=$4
  local dir="$OUT/$name-t$threads-r$rep" log="$OUT/$name-t$threads-r$rep.time"
  local before after
  before=$(load1)
  # shellcheck disable=SC2086
  "$TIME" -v -o "$log" "$BIN" run $scen --out "$dir" --threads "$threads" --quiet --force >"$log.out"
  after=$(load1)
  local rstart rend
  rstart=$(date +%s.%N)
  "$BIN" report "$dir" >/dev/null
  rend=$(date +%s.%N)
  python3 - "$name" "$threads" "$rep" "$dir" "$log" "$before" "$after" "$rstart" "$rend" >>"$RESULTS" <<'EOF'
import csv, json, sys
name, threads, rep, d, log, before, after, rs, re_ = sys.argv[1:]
threads = int(threads)
wall = cpu = rss = None
for line in open(log):
    k, _, v = line.strip().rpartition(": ")
    if k == "Elapsed (wall clock) time (h:mm:ss or m:ss)":
        parts = [float(x) for x in v.split(":")]
        wall = sum(p * 60 ** i for i, p in enumerate(reversed(parts)))
    elif k in ("User time (seconds)", "System time (seconds)"):
        cpu = (cpu or 0.0) + float(v)
    elif k == "Maximum resident set size (kbytes)":
        rss = int(v) / 1024.0
man = json.load(open(f"{d}/manifest.json"))
rows = list(csv.DictReader(open(f"{d}/cells.csv")))
cells = len(rows)
sim_nominal = cells * man["duration_s"]
sim_actual = sum(float(r["sim_time_s"]) for r in rows)
cell_wall = sum(float(r["wall_s"]) for r in csv.DictReader(open(f"{d}/timing.csv")))
outside = wall - cell_wall / threads
print("\t".join(str(x) for x in [
    name, threads, rep, cells, f"{wall:.2f}", f"{cpu:.2f}", f"{rss:.1f}",
    f"{60 * cells / wall:.1f}", f"{sim_nominal / wall:.2f}", f"{sim_actual / wall:.2f}",
    f"{sim_actual / sim_nominal:.3f}", f"{cell_wall:.2f}", f"{outside:.2f}",
    f"{float(re_) - float(rs):.2f}", before, after]))
EOF
  tail -n 1 "$RESULTS"
}

echo "binary: $BIN ($(sha256sum "$BIN" | cut -c1-12)), $(nproc) CPUs, started $(date -u +%FT%TZ), load $(load1)"
printf 'scenario\tthreads\trepeat\tcells\twall_s\tcpu_s\tpeak_rss_MiB\tcells_per_min\tsim_s_per_wall_s_nominal\tsim_s_per_wall_s_actual\tsim_actual_share\tcell_wall_sum_s\toutside_cells_s\treport_s\tload_before\tload_after\n'
for rep in $(seq 1 "$REPEATS"); do
  for name in $SCENARIOS; do
    # A name is a file in scenarios/; a path ending in .toml is taken as it is.
    case $name in
      *.toml) file=$name; name=$(basename "$name" .toml) ;;
      *) file="$ROOT/scenarios/$name.toml" ;;
    esac
    for threads in 1 2; do
      run "$name" "$file" "$threads" "$rep"
    done
  done
done
if [ "${RUN_DEFAULT:-0}" = 1 ]; then
  run default "" 2 1
fi

echo
echo "medians over repeats; efficiency = t1 / (2 t2) on the median wall times"
python3 - "$RESULTS" <<'EOF'
import statistics, sys
from collections import defaultdict
runs = defaultdict(list)
for line in open(sys.argv[1]):
    f = line.rstrip("\n").split("\t")
    runs[(f[0], int(f[1]))].append(f)
med = lambda rs, i: statistics.median(float(r[i]) for r in rs)
print("scenario\tthreads\truns\tcells\twall_s\tpeak_rss_MiB\tcells_per_min\tsim_s_per_wall_s(nominal/actual)\toutside_cells_s\treport_s\tefficiency")
for (name, t), rs in sorted(runs.items()):
    eff = ""
    if t == 2 and (name, 1) in runs:
        eff = f"{med(runs[(name, 1)], 4) / (2 * med(rs, 4)):.3f}"
    print(f"{name}\t{t}\t{len(rs)}\t{rs[0][3]}\t{med(rs, 4):.2f}\t{max(float(r[6]) for r in rs):.1f}\t"
          f"{med(rs, 7):.1f}\t{med(rs, 8):.2f}/{med(rs, 9):.2f}\t{med(rs, 12):.2f}\t{med(rs, 13):.2f}\t{eff}")
EOF
