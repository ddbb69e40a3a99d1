#!/usr/bin/env bash
# End-to-end check of the SLURM path (scenarios/cluster/) on a real single-node cluster.
#
#   tests/cluster/slurm_check.sh [GRIPSWEEP_BIN]
#
# The gripsweep binary comes from the argument or GRIPSWEEP_BIN; nothing is built here. It is
# copied into the scratch folder first, so a rebuild elsewhere cannot swap it mid-check.
#
# What it does:
#  1. installs munge, slurmctld, slurmd and the SLURM client from Debian's packages when they
#     are missing (needs root and apt; no prompts; a policy-rc.d, only while installing and
#     only if there is none, keeps the packages from starting system-wide daemons);
#  2. writes a single-node cluster configuration under a fresh scratch folder (all state
#     there, SLURM_CONF pointing at it, every address 127.0.0.1) and starts munged, slurmctld
#     and slurmd, recording their PIDs; if one does not come up, its own output is printed and
#     the check fails. (slurmd binds to loopback only; slurmctld 22.05 always binds to every
#     address, and answers only RPCs signed with the check's fresh munge key.)
#  3. runs scenarios/quick.toml in one process, then as a 4-task job array plus the join job
#     (scenarios/cluster/submit.sh), and checks the joined cells.csv is byte-identical to the
#     single-process one (and timing.csv lists the same cells in the same order);
#  4. fault: submits the study again, cancels one array task once it has written a cell
#     (repeated on a fresh folder, at most 3 times, if the task outruns the cancel), checks
#     that SLURM drops the join job (--kill-on-invalid-dep) and that `gripsweep merge` refuses
#     the set (exit 2) naming the unfinished shard (and the missing one when its folder is left
#     out), then re-runs that index alone with submit.sh --indices (it resumes: the written
#     cell is kept, not run twice) and checks the new join equals the single-process run;
#  5. on every exit path: cancels its jobs, stops the daemons it started (by PID, and only
#     those), removes the scratch folder (kept on failure, for its logs).
#
# Takes about a minute here once the packages are in (2 cores), plus the install.
#
# Environment: CLUSTER_CHECK_PORT (slurmctld's port, slurmd takes the next; default 6817),
# CLUSTER_CHECK_TIMEOUT (seconds allowed for each batch of jobs; default 120),
# CLUSTER_CHECK_KEEP=1 keeps the scratch folder.
set -euo pipefail

repo=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
cluster_dir="$repo/scenarios/cluster"
scenario="$repo/scenarios/quick.toml"
shards=4
fault_shard=2 # the shard cancelled mid-run (its cells are the slower control law)
job_timeout=${CLUSTER_CHECK_TIMEOUT:-120}
ctld_port=${CLUSTER_CHECK_PORT:-6817}
slurmd_port=$((ctld_port + 1))

t_start=$EPOCHREALTIME
say() { printf '[slurm-check %6.1fs] %s\n' "$(elapsed "$t_start")" "$*"; }
elapsed() { awk -v a="$1" -v b="$EPOCHREALTIME" 'BEGIN { printf "%.1f", b - a }'; }
logs_root="" # the run folder whose job logs a failure prints
fail() {
    local f
    if [ -n "$logs_root" ] && [ -d "$logs_root/logs" ]; then
        for f in "$logs_root"/logs/*; do
            [ -f "$f" ] || continue
            echo "----- job log $f (last 20 lines)" >&2
            tail -n 20 "$f" >&2
        done
    fi
    printf '[slurm-check] FAILED: %s\n' "$*" >&2
    exit 1
}

# ---------------------------------------------------------------- inputs
bin_in=${1:-${GRIPSWEEP_BIN:-}}
[ -n "$bin_in" ] || fail "give the gripsweep binary: tests/cluster/slurm_check.sh PATH (or GRIPSWEEP_BIN=PATH)"
if ! bin_path=$(command -v "$bin_in"); then
    fail "gripsweep binary '$bin_in' not found"
fi
[ -x "$bin_path" ] || fail "$bin_path is not executable"
[ -f "$scenario" ] || fail "no scenario at $scenario"

# No inherited scheduler settings (this check may itself run inside someone's SLURM job).
while IFS='=' read -r name _; do
    case "$name" in SLURM_* | SBATCH_* | SQUEUE_* | SINFO_* | SCONTROL_* | SALLOC_* | SRUN_*) unset "$name" ;; esac
done < <(env)

# ---------------------------------------------------------------- cleanup (every exit path)
scratch=""
pids=()      # "name:pid" in start order
jobs_seen=() # job ids submitted here
policy_created=""
ok=""

stop_daemons() {
    local idx entry name pid deadline
    for ((idx = ${#pids[@]} - 1; idx >= 0; idx--)); do
        entry=${pids[idx]}
        name=${entry%%:*}
        pid=${entry##*:}
        if kill -0 "$pid" 2>/dev/null; then
            kill -TERM "$pid" 2>/dev/null || true
            deadline=$((SECONDS + 20))
            while kill -0 "$pid" 2>/dev/null && [ "$SECONDS" -lt "$deadline" ]; do sleep 0.1; done
            if kill -0 "$pid" 2>/dev/null; then
                echo "[slurm-check] $name (pid $pid) ignored SIGTERM for 20 s; sending SIGKILL" >&2
                kill -KILL "$pid" 2>/dev/null || true
            fi
        fi
        wait "$pid" 2>/dev/null || true
    done
    pids=()
}

cleanup() {
    local rc=$?
    set +e
    if [ -n "$policy_created" ]; then rm -f /usr/sbin/policy-rc.d; fi
    if [ "${#jobs_seen[@]}" -gt 0 ] && [ "${#pids[@]}" -ge 2 ]; then
        scancel "${jobs_seen[@]}" 2>/dev/null
        local deadline=$((SECONDS + 20)) left
        while [ "$SECONDS" -lt "$deadline" ]; do
            left=$(squeue -h -o %i 2>/dev/null) || break
            [ -n "$left" ] || break
            sleep 0.2
        done
    fi
    local t_stop=$EPOCHREALTIME
    if [ "${#pids[@]}" -gt 0 ]; then
        stop_daemons
        echo "[slurm-check] daemons stopped in $(elapsed "$t_stop") s"
    fi
    if [ -n "$scratch" ] && [ -d "$scratch" ]; then
        if [ "$rc" -eq 0 ] && [ -n "$ok" ] && [ "${CLUSTER_CHECK_KEEP:-0}" != 1 ]; then
            rm -rf "$scratch"
        else
            echo "[slurm-check] scratch folder kept for inspection: $scratch" >&2
        fi
    fi
    exit "$rc"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# ---------------------------------------------------------------- packages
need_install=""
for tool in munged mungekey munge unmunge slurmctld slurmd sbatch scontrol squeue sinfo scancel; do
    if ! command -v "$tool" >/dev/null && [ ! -x "/usr/sbin/$tool" ]; then need_install=1; fi
done
t_install=$EPOCHREALTIME
if [ -n "$need_install" ]; then
    [ "$(id -u)" -eq 0 ] || fail "SLURM/munge are not installed and this is not root: cannot apt-get install them"
    command -v apt-get >/dev/null || fail "SLURM/munge are not installed and there is no apt-get here"
    say "installing munge, slurmctld, slurmd, slurm-client with apt-get"
    # Keep the packages' init scripts from starting system-wide daemons we would not own.
    if [ ! -e /usr/sbin/policy-rc.d ]; then
        printf '#!/bin/sh\nexit 101\n' >/usr/sbin/policy-rc.d
        chmod 755 /usr/sbin/policy-rc.d
        policy_created=1
    fi
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq || fail "apt-get update failed"
    apt-get install -y -qq --no-install-recommends munge slurmctld slurmd slurm-client \
        || fail "apt-get install of munge/slurmctld/slurmd/slurm-client failed"
    if [ -n "$policy_created" ]; then rm -f /usr/sbin/policy-rc.d; policy_created=""; fi
    t_install_s=$(elapsed "$t_install")
    say "installed in ${t_install_s} s"
else
    t_install_s=0
    say "munge and SLURM already installed"
fi
export PATH="$PATH:/usr/sbin:/sbin"
say "$(slurmctld -V 2>&1), munge $(munged --version 2>&1 | head -n1)"

# ---------------------------------------------------------------- scratch and configuration
scratch=$(mktemp -d /tmp/gripsweep-slurm.XXXXXX)
chmod 755 "$scratch"
mkdir -p "$scratch/munge" "$scratch/ctld" "$scratch/slurmd" "$scratch/log" "$scratch/bin" "$scratch/runs"
chmod 755 "$scratch/munge" # munged refuses a socket folder without execute permission for all
cp "$bin_path" "$scratch/bin/gripsweep"
bin="$scratch/bin/gripsweep"
export GRIPSWEEP_BIN="$bin"
"$bin" --version >/dev/null || fail "$bin does not run"

sock="$scratch/munge/munge.socket"
mungekey --create --keyfile="$scratch/munge/munge.key" >/dev/null 2>&1 \
    || mungekey --create --keyfile="$scratch/munge/munge.key" # again, for its own error message
chmod 600 "$scratch/munge/munge.key"

node_line=$(slurmd -C 2>/dev/null | head -n1) || true
case "$node_line" in
    NodeName=*) ;;
    *) fail "slurmd -C printed no node description: $(slurmd -C 2>&1 | tail -n 5)" ;;
esac
node_name=$(sed -n 's/^NodeName=\([^ ]*\).*/\1/p' <<<"$node_line")
mem=$(sed -n 's/.*RealMemory=\([0-9]*\).*/\1/p' <<<"$node_line")
mem=$((mem > 2048 ? mem - 1024 : mem / 2)) # leave the system some memory
node_line=$(sed "s/RealMemory=[0-9]*/RealMemory=$mem/" <<<"$node_line")
node_cpus=$(sed -n 's/.*CPUs=\([0-9]*\).*/\1/p' <<<"$node_line")

export SLURM_CONF="$scratch/slurm.conf"
cat >"$SLURM_CONF" <<EOF
# Written by tests/cluster/slurm_check.sh: a throw-away single-node cluster on loopback.
ClusterName=gscheck
SlurmctldHost=localhost(127.0.0.1)
SlurmctldPort=$ctld_port
SlurmdPort=$slurmd_port
CommunicationParameters=NoInAddrAny
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$sock
CredType=cred/munge
StateSaveLocation=$scratch/ctld
SlurmdSpoolDir=$scratch/slurmd
SlurmctldPidFile=$scratch/ctld/slurmctld.pid
SlurmdPidFile=$scratch/slurmd/slurmd.pid
SlurmctldLogFile=$scratch/log/slurmctld.log
SlurmdLogFile=$scratch/log/slurmd.log
SlurmctldDebug=info
SlurmdDebug=info
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/backfill
ReturnToService=2
MpiDefault=none
MailProg=/bin/true
KillWait=5
MinJobAge=300
$node_line NodeAddr=127.0.0.1 State=UNKNOWN
PartitionName=sweep Nodes=$node_name Default=YES MaxTime=INFINITE State=UP
EOF

# ---------------------------------------------------------------- daemons
show_log() { # name, files...
    local name=$1 f
    shift
    echo "----- $name: its own output -----" >&2
    for f in "$@"; do # the first non-empty one: the daemon's stderr, else its log file
        if [ -s "$f" ]; then
            echo "--- $f (last 40 lines)" >&2
            tail -n 40 "$f" >&2
            break
        fi
    done
    echo "-----" >&2
}
declare -A daemon_logs
daemon_alive() { # name:pid entries must all be running
    local entry name pid
    for entry in "${pids[@]}"; do
        name=${entry%%:*}
        pid=${entry##*:}
        if ! kill -0 "$pid" 2>/dev/null; then
            local rc=0
            wait "$pid" 2>/dev/null || rc=$?
            # shellcheck disable=SC2086
            show_log "$name" ${daemon_logs[$name]}
            fail "$name (pid $pid) exited (status $rc); its log is above"
        fi
    done
}
# wait_until SECONDS WHAT COMMAND...: poll COMMAND every poll_s (0.2) s, failing after SECONDS.
wait_until() {
    local limit=$1 what=$2
    shift 2
    local deadline=$((SECONDS + limit))
    while ! "$@"; do
        daemon_alive
        [ "$SECONDS" -lt "$deadline" ] || fail "timed out after ${limit} s waiting for $what"
        sleep "${poll_s:-0.2}"
    done
}

t_daemons=$EPOCHREALTIME
daemon_logs[munged]="$scratch/log/munged.out $scratch/log/munged.log"
munged -F --socket="$sock" --key-file="$scratch/munge/munge.key" \
    --pid-file="$scratch/munge/munged.pid" --log-file="$scratch/log/munged.log" \
    --seed-file="$scratch/munge/munged.seed" >"$scratch/log/munged.out" 2>&1 &
pids+=("munged:$!")
munge_works() {
    local cred
    cred=$(munge -n --socket="$sock" 2>/dev/null) || return 1
    unmunge --socket="$sock" >/dev/null 2>&1 <<<"$cred"
}
wait_until 20 "munged to answer on $sock" munge_works

daemon_logs[slurmctld]="$scratch/log/slurmctld.out $scratch/log/slurmctld.log"
slurmctld -D -i >"$scratch/log/slurmctld.out" 2>&1 &
pids+=("slurmctld:$!")
ctld_up() {
    local out
    out=$(scontrol ping 2>&1) || return 1
    [[ "$out" == *"is UP"* ]]
}
wait_until 30 "slurmctld to answer scontrol ping" ctld_up

daemon_logs[slurmd]="$scratch/log/slurmd.out $scratch/log/slurmd.log"
slurmd -D -N "$node_name" >"$scratch/log/slurmd.out" 2>&1 &
pids+=("slurmd:$!")
node_idle() {
    local st
    st=$(sinfo -h -N -n "$node_name" -o %T 2>/dev/null) || return 1
    [ "$st" = idle ]
}
wait_until 30 "node $node_name to be idle (sinfo)" node_idle
t_daemons_s=$(elapsed "$t_daemons")
say "cluster up in ${t_daemons_s} s: node $node_name, $node_cpus CPU(s), ports $ctld_port/$slurmd_port on 127.0.0.1"

# Every address in the configuration is 127.0.0.1, and slurmd binds to loopback only
# (NoInAddrAny). slurmctld 22.05 always binds to every address (NoInAddrAny excludes it); it
# answers only RPCs signed with this check's fresh munge key.
if command -v ss >/dev/null; then
    listeners=$(ss -Hltn 2>/dev/null) || listeners=""
    addrs=$(awk -v p=":$slurmd_port" '$4 ~ p"$" { print $4 }' <<<"$listeners")
    [ -n "$addrs" ] || fail "nothing listens on slurmd's port $slurmd_port"
    while read -r a; do
        [ "$a" = "127.0.0.1:$slurmd_port" ] || fail "slurmd listens on $a, not only on loopback"
    done <<<"$addrs"
fi

# ---------------------------------------------------------------- job helpers
terminal_state() { # a state SLURM will not leave
    case "$1" in
        COMPLETED | FAILED | CANCELLED | TIMEOUT | NODE_FAIL | OUT_OF_MEMORY | PREEMPTED | DEADLINE | BOOT_FAIL) return 0 ;;
        *) return 1 ;;
    esac
}
# job_lines ID: one "JobId=… ArrayTaskId=… JobState=… Reason=… ExitCode=…" line per job or task.
job_lines() {
    local out
    out=$(scontrol -o show job "$1" 2>&1) || {
        echo "scontrol show job $1: $out" >&2
        return 1
    }
    awk '{ line = ""; for (i = 1; i <= NF; i++) if ($i ~ /^(JobId|ArrayJobId|ArrayTaskId|JobState|Reason|ExitCode)=/) line = line " " $i; print substr(line, 2) }' <<<"$out"
}
job_states() { # the JobState of every task of ID, one a line
    local lines
    lines=$(job_lines "$1") || return 1
    sed -n 's/.*JobState=\([A-Z_]*\).*/\1/p' <<<"$lines"
}
job_done() { # all tasks of ID in a terminal state
    local states s
    states=$(job_states "$1") || return 1
    [ -n "$states" ] || return 1
    while read -r s; do terminal_state "$s" || return 1; done <<<"$states"
}
wait_job() { wait_until "$job_timeout" "job $1 to finish ($2)" job_done "$1"; }
expect_states() { # ID STATE: every task of ID ended in STATE
    local states s
    states=$(job_states "$1")
    while read -r s; do
        if [ "$s" != "$2" ]; then
            job_lines "$1" >&2 || true
            fail "job $1 ($3): expected every task $2, got $s"
        fi
    done <<<"$states"
}
submit() { # submit.sh args...; sets array_id, join_id
    local out
    out=$("$cluster_dir/submit.sh" "$@" 2>"$scratch/log/submit.err") || {
        cat "$scratch/log/submit.err" >&2
        fail "submit.sh $* failed"
    }
    array_id=$(sed -n 's/^array_job=//p' <<<"$out")
    join_id=$(sed -n 's/^join_job=//p' <<<"$out")
    [[ "$array_id" =~ ^[0-9]+$ && "$join_id" =~ ^[0-9]+$ ]] || fail "submit.sh printed no job ids: $out"
    jobs_seen+=("$array_id" "$join_id")
}
same_bytes() { # A B WHAT
    if ! cmp -s "$1" "$2"; then
        diff "$1" "$2" | head -n 20 >&2 || true
        fail "$3: $1 and $2 differ"
    fi
}
cell_ids() { cut -d, -f1 "$1"; }

# ---------------------------------------------------------------- reference: one process
runs="$scratch/runs"
t_ref=$EPOCHREALTIME
"$bin" run "$scenario" --out "$runs/single" --threads "$node_cpus" --quiet >"$scratch/log/single.out" 2>&1 \
    || { cat "$scratch/log/single.out" >&2; fail "the single-process run failed"; }
single="$runs/single"
n_cells=$(($(wc -l <"$single/cells.csv") - 1))
victim_cells=$(((n_cells - fault_shard) / shards + 1)) # matrix indices ≡ fault_shard−1 mod shards
[ "$victim_cells" -ge 2 ] || fail "shard $fault_shard of $shards has $victim_cells cell(s): too few to cancel mid-run"
say "single-process run: $n_cells cells in $(elapsed "$t_ref") s"

# ---------------------------------------------------------------- clean array + join
t_jobs=$EPOCHREALTIME
root="$runs/array"
logs_root=$root
submit "$scenario" "$shards" "$root"
say "submitted array job $array_id ($shards shards) and join job $join_id"
wait_job "$array_id" "array"
wait_job "$join_id" "join after array $array_id"
expect_states "$array_id" COMPLETED "shard array"
expect_states "$join_id" COMPLETED "join"
same_bytes "$single/cells.csv" "$root/joined/cells.csv" "joined cells.csv vs single-process"
[ "$(cell_ids "$single/timing.csv")" = "$(cell_ids "$root/joined/timing.csv")" ] \
    || fail "joined timing.csv does not list the single-process run's cells in its order"
[ -s "$root/joined/summary.md" ] || fail "the join job wrote no report ($root/joined/summary.md)"
for ((i = 1; i <= shards; i++)); do
    [ -s "$root/logs/shard-$i.job-$array_id.log" ] || fail "no log for array task $i"
done
say "array of $shards + join: joined cells.csv equals the single-process run byte for byte ($(elapsed "$t_jobs") s)"

# ---------------------------------------------------------------- fault: one task killed mid-run
t_fault=$EPOCHREALTIME
has_a_row() {
    local n
    [ -f "$victim/cells.csv" ] || return 1
    n=$(wc -l <"$victim/cells.csv")
    [ "$n" -ge 2 ]
}
# A task's cells take about a second each here; should the task still outrun the cancel (a
# much faster machine), the attempt is repeated on a fresh folder, at most three times.
attempt=0
while :; do
    attempt=$((attempt + 1))
    root="$runs/fault-$attempt"
    logs_root=$root
    victim="$root/shard-$fault_shard-of-$shards"
    submit "$scenario" "$shards" "$root"
    fault_array=$array_id
    fault_join=$join_id
    say "submitted array job $fault_array and join job $fault_join; cancelling task $fault_shard after its first cell"
    poll_s=0.05 wait_until "$job_timeout" "task ${fault_array}_$fault_shard to write a cell" has_a_row
    scancel "${fault_array}_$fault_shard" 2>"$scratch/log/scancel.err" || true
    wait_job "$fault_array" "array with task $fault_shard cancelled"
    task_state=$(job_states "${fault_array}_$fault_shard")
    if [ "$task_state" = COMPLETED ] && [ "$attempt" -lt 3 ]; then
        say "task $fault_shard finished before the cancel landed; again on a fresh folder"
        wait_job "$fault_join" "join of attempt $attempt"
        continue
    fi
    [ "$task_state" = CANCELLED ] \
        || fail "task ${fault_array}_$fault_shard ended $task_state, not CANCELLED ($(cat "$scratch/log/scancel.err"))"
    break
done
for ((i = 1; i <= shards; i++)); do
    [ "$i" -eq "$fault_shard" ] && continue
    expect_states "${fault_array}_$i" COMPLETED "untouched shard $i"
done
# The join can never start now; --kill-on-invalid-dep makes SLURM drop it (a few s later).
wait_job "$fault_join" "join whose dependency failed"
join_line=$(job_lines "$fault_join")
[[ "$join_line" == *"JobState=CANCELLED"* ]] || fail "join $fault_join was not dropped: $join_line"
[ ! -e "$root/joined" ] || fail "the dropped join left $root/joined"
rows=$(($(wc -l <"$victim/cells.csv") - 1))
say "task $fault_shard cancelled with $rows of $victim_cells cell(s) written; join $fault_join dropped ($join_line)"

# merge refuses the set: the unfinished shard, then the missing one.
all_dirs=()
for ((i = 1; i <= shards; i++)); do all_dirs+=("$root/shard-$i-of-$shards"); done
set +e
merge_out=$("$bin" merge "${all_dirs[@]}" --out "$root/merge-attempt" 2>&1)
merge_rc=$?
set -e
[ "$merge_rc" -eq 2 ] || fail "merge of a set with an unfinished shard exited $merge_rc, not 2: $merge_out"
[[ "$merge_out" == *"incomplete shard(s) $fault_shard/$shards"* ]] \
    || fail "merge's refusal does not name shard $fault_shard/$shards: $merge_out"
others=()
for ((i = 1; i <= shards; i++)); do [ "$i" -eq "$fault_shard" ] || others+=("$root/shard-$i-of-$shards"); done
set +e
merge_out2=$("$bin" merge "${others[@]}" --out "$root/merge-attempt" 2>&1)
merge_rc2=$?
set -e
[ "$merge_rc2" -eq 2 ] || fail "merge without shard $fault_shard exited $merge_rc2, not 2: $merge_out2"
[[ "$merge_out2" == *"missing shard(s) $fault_shard/$shards"* ]] \
    || fail "merge's refusal does not name the missing shard $fault_shard/$shards: $merge_out2"
[ ! -e "$root/merge-attempt" ] || fail "a refused merge left $root/merge-attempt"
say "merge refuses (exit 2): $merge_out"
say "merge refuses (exit 2): $merge_out2"

# Re-run that index alone: it resumes, and a fresh join completes the study.
submit --indices "$fault_shard" "$scenario" "$shards" "$root"
say "re-submitted shard $fault_shard as array job $array_id, join job $join_id"
wait_job "$array_id" "re-run of shard $fault_shard"
wait_job "$join_id" "join after the re-run"
expect_states "$array_id" COMPLETED "re-run of shard $fault_shard"
expect_states "$join_id" COMPLETED "join after the re-run"
rerun_log="$root/logs/shard-$fault_shard.job-$array_id.log"
kept_msg="($((victim_cells - rows)) run now, $rows kept from before)"
rerun_text=$(cat "$rerun_log")
[[ "$rerun_text" == *"$kept_msg"* ]] \
    || fail "the re-run of shard $fault_shard did not resume (expected '$kept_msg' in $rerun_log): $rerun_text"
ids=$(cell_ids "$victim/cells.csv" | tail -n +2)
[ "$(sort <<<"$ids" | uniq -d)" = "" ] || fail "shard $fault_shard holds a cell twice after the re-run"
same_bytes "$single/cells.csv" "$root/joined/cells.csv" "joined cells.csv after the re-run vs single-process"
[ "$(cell_ids "$single/timing.csv")" = "$(cell_ids "$root/joined/timing.csv")" ] \
    || fail "timing.csv after the re-run does not list the single-process run's cells in its order"
say "re-run of shard $fault_shard resumed $kept_msg; joined cells.csv equals the single-process run ($(elapsed "$t_fault") s for the fault)"

ok=1
say "PASS: install ${t_install_s} s, daemons up ${t_daemons_s} s, whole check $(elapsed "$t_start") s (before stopping the daemons)"
