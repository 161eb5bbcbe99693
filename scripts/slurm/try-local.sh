#!/bin/bash
# Try submit.sh on a one-node Slurm started here: Debian's slurm-wlm and
# munge, a minimal slurm.conf for this host, munged, slurmctld and slurmd
# started from a temporary folder (no file under /etc is changed), a small
# generated cohort (invented data) in 3 shards, and the merged warehouse
# compared with a single-process ingest, table by table.
#
#   scripts/slurm/try-local.sh        (as root on Debian or Ubuntu, with Go)
#
# Where something needed is missing (not root, no apt-get, a daemon does not
# start, for example in a container without the privileges slurmd wants) it
# prints SKIP with the reason and exits 0. It is not part of `go test`.
set -uo pipefail
here=$(cd "$(dirname "$0")" && pwd)
repo=$(cd "$here/../.." && pwd)
skip() {
	echo "SKIP: $*" >&2
	exit 0
}
fail() {
	echo "FAIL: $*" >&2
	exit 1
}

[[ $(id -u) == 0 ]] || skip "needs root to install and start Slurm"
command -v go >/dev/null || skip "needs Go to build topostate"
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v munged >/dev/null; then
	command -v apt-get >/dev/null || skip "no apt-get to install slurm-wlm and munge"
	echo "installing slurm-wlm and munge with apt-get"
	DEBIAN_FRONTEND=noninteractive apt-get install -y slurm-wlm munge >/dev/null ||
		{ apt-get update >/dev/null && DEBIAN_FRONTEND=noninteractive apt-get install -y slurm-wlm munge >/dev/null; } ||
		skip "apt-get install slurm-wlm munge failed"
fi

d=$(mktemp -d /tmp/topostate-slurm.XXXXXX)
chmod 755 "$d"
pids=()
cleanup() {
	# Stop only the daemons this script started, by their process ids.
	for p in "${pids[@]}"; do kill "$p" 2>/dev/null; done
	sleep 1
	if [[ ${KEEP:-} == "" ]]; then rm -rf "$d"; else echo "kept $d"; fi
}
trap cleanup EXIT

# munge: a key and a socket of our own.
mkdir -p "$d/munge"
chmod 700 "$d/munge"
dd if=/dev/urandom of="$d/munge/munge.key" bs=1024 count=1 status=none
chmod 400 "$d/munge/munge.key"
munged --force --key-file="$d/munge/munge.key" --socket="$d/munge/munge.socket.2" \
	--pid-file="$d/munge/munged.pid" --log-file="$d/munge/munged.log" --seed-file="$d/munge/munged.seed" ||
	skip "munged did not start: $(tail -3 "$d/munge/munged.log" 2>/dev/null)"
sleep 1
pids+=("$(cat "$d/munge/munged.pid")")

host=$(hostname -s)
cpus=$(nproc)
mem=$(($(awk '/MemTotal/ {print int($2 / 1024)}' /proc/meminfo) - 1024))
mkdir -p "$d/state" "$d/spool" "$d/log"
cat >"$d/slurm.conf" <<EOF
ClusterName=topostate-try
SlurmctldHost=$host(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$d/munge/munge.socket.2
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
StateSaveLocation=$d/state
SlurmdSpoolDir=$d/spool
SlurmctldPidFile=$d/slurmctld.pid
SlurmdPidFile=$d/slurmd.pid
SlurmctldLogFile=$d/log/slurmctld.log
SlurmdLogFile=$d/log/slurmd.log
SlurmctldPort=26817
SlurmdPort=26818
NodeName=$host NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=try Nodes=$host Default=YES MaxTime=INFINITE State=UP
EOF
export SLURM_CONF=$d/slurm.conf
slurmctld -f "$SLURM_CONF" || skip "slurmctld did not start: $(tail -3 "$d/log/slurmctld.log" 2>/dev/null)"
sleep 2
[[ -f $d/slurmctld.pid ]] && pids+=("$(cat "$d/slurmctld.pid")")
slurmd -f "$SLURM_CONF" || skip "slurmd did not start: $(tail -3 "$d/log/slurmd.log" 2>/dev/null)"
sleep 2
[[ -f $d/slurmd.pid ]] && pids+=("$(cat "$d/slurmd.pid")")
ready=
for _ in $(seq 30); do
	state=$(sinfo -h -N -o %t 2>/dev/null | head -1)
	if [[ $state == idle* ]]; then
		ready=1
		break
	fi
	sleep 1
done
[[ -n $ready ]] || skip "the node did not become idle (state '${state:-none}'): $(tail -3 "$d/log/slurmd.log" 2>/dev/null)"
echo "Slurm is up: $(sinfo -h -o '%P %D %c %m %t')"

echo "building topostate"
(cd "$repo" && go build -o "$d/bin/topostate" ./cmd/topostate) || fail "go build"
bin=$d/bin/topostate
"$bin" simulate --out "$d/cohort" --subjects 12 --regions 14 --timepoints 240 --seed 8 >/dev/null || fail "simulate"
opts="--window 24 --states 3 --restarts 3 --seed 5"

echo "submitting the example (3 shards)"
half=$(((mem - 512) / 2))
TOPOSTATE=$bin INPUT=$d/cohort WORK=$d/work DB=$d/merged.duckdb ANALYSIS=try SHARDS=3 INGEST_OPTS=$opts \
	PLAN_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	SAMPLE_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	FIT_RES="--cpus-per-task=$cpus --mem=${half}M --time=00:10:00" \
	COMPUTE_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	MERGE_RES="--cpus-per-task=1 --mem=1G --time=00:10:00" \
	"$here/submit.sh" || fail "submit.sh"
for _ in $(seq 300); do
	[[ -z $(squeue -h 2>/dev/null) ]] && break
	sleep 1
done
[[ -z $(squeue -h) ]] || {
	squeue
	fail "jobs still queued after 5 minutes"
}
echo "job logs:"
for f in "$d"/work.logs/*.out; do
	echo "--- $(basename "$f")"
	cat "$f"
done
[[ -f $d/merged.duckdb ]] || fail "no merged warehouse; see the logs above and $d/log"

# shellcheck disable=SC2086
"$bin" ingest --quiet --input "$d/cohort" --db "$d/single.duckdb" --analysis try $opts >/dev/null || fail "single-process ingest"
bad=0
for t in analyses inputs regions state_centroids state_sequence state_metrics subject_dynamics transitions betti_curves filtration_events state_networks subjects; do
	cols='*'
	[[ $t == analyses ]] && cols='* EXCLUDE (created_at)'
	n=$("$bin" query --db "$d/single.duckdb" --format csv --sql \
		"ATTACH '$d/merged.duckdb' AS m (READ_ONLY);
		 SELECT (SELECT count(*) FROM (SELECT $cols FROM main.$t EXCEPT ALL SELECT $cols FROM m.$t))
		      + (SELECT count(*) FROM (SELECT $cols FROM m.$t EXCEPT ALL SELECT $cols FROM main.$t)) AS differ" | tail -1)
	echo "  $t: $n differing rows"
	[[ $n == 0 ]] || bad=1
done
[[ $bad == 0 ]] || fail "the Slurm run differs from a single-process ingest"
echo "the example ran under Slurm (plan, sample[1-3], fit, compute[1-3], merge) and equals a single-process ingest"

wait_jobs() {
	for _ in $(seq 300); do
		[[ -z $(squeue -h 2>/dev/null) ]] && return 0
		sleep 1
	done
	squeue
	fail "jobs still queued after 5 minutes"
}

echo "submitting a replication in the merged analysis's states (no sample stage)"
TOPOSTATE=$bin INPUT=$d/cohort WORK=$d/work2 DB=$d/replication.duckdb ANALYSIS=again SHARDS=2 \
	INGEST_OPTS="--window 24" STATES_FROM=try STATES_DB=$d/merged.duckdb \
	PLAN_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	FIT_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	COMPUTE_RES="--cpus-per-task=1 --mem=512M --time=00:10:00" \
	MERGE_RES="--cpus-per-task=1 --mem=1G --time=00:10:00" \
	"$here/submit.sh" || fail "submit.sh (replication)"
wait_jobs
[[ -f $d/replication.duckdb ]] || fail "no replication warehouse: $(cat "$d"/work2.logs/*.out)"
n=$("$bin" query --db "$d/replication.duckdb" --format csv --sql \
	"ATTACH '$d/merged.duckdb' AS m (READ_ONLY);
	 SELECT (SELECT count(*) FROM (SELECT state, i, j, weight FROM main.state_centroids EXCEPT ALL SELECT state, i, j, weight FROM m.state_centroids))
	      + (SELECT count(*) FROM (SELECT subject_id, window_index, state FROM main.state_sequence EXCEPT ALL SELECT subject_id, window_index, state FROM m.state_sequence)) AS differ" | tail -1)
[[ $n == 0 ]] || fail "the replication of the same cohort differs in $n centroid or label rows"
echo "PASS: both submissions ran under Slurm; the replication of the same cohort in its own states gives the same labels"
