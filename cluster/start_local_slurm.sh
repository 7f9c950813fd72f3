#!/usr/bin/env bash
# Start a throwaway single-node SLURM cluster on loopback for tests.
#
# Usage: cluster/start_local_slurm.sh STATE_DIR
#
# Everything the cluster needs (munge key and socket, slurm.conf, spool and
# state folders, logs, pid files) lives under STATE_DIR. The one path outside
# it is the symlink /run/slurm/conf -> STATE_DIR: that is where SLURM commands
# look for slurm.conf when SLURM_CONF is unset (and /etc/slurm/slurm.conf
# does not exist), as it is inside jobs run by Snakemake's SLURM executor,
# which clears SLURM_* variables before its nested `srun`. Other clients may
# also use
#
#   export SLURM_CONF=STATE_DIR/slurm.conf
#
# Stop it with cluster/stop_local_slurm.sh STATE_DIR.
#
# Needs root (slurmd launches jobs as their submitting user) and Debian's
# slurmctld, slurmd, slurm-client and munge packages. No systemd, cgroups or
# accounting database: processes are tracked through /proc and job states
# are kept in slurmctld for MinJobAge seconds, so `squeue` can report them.
#
# Optional: SLURM_TEST_CPUS, the CPUs the node offers (default: what slurmd
# detects). More than the machine has oversubscribes it, so that many short
# test jobs run side by side.
set -euo pipefail

usage() { echo "usage: $0 STATE_DIR" >&2; exit 2; }
[[ $# -eq 1 ]] || usage

die() { echo "start_local_slurm: $*" >&2; exit 1; }

# The daemons live in /usr/sbin, which a non-login shell may leave out of PATH.
PATH=$PATH:/usr/sbin:/sbin

[[ $(id -u) -eq 0 ]] || die "must run as root"
for tool in munged mungekey slurmctld slurmd sinfo scontrol; do
    command -v "$tool" >/dev/null || die "'$tool' not found; install: apt-get install -y --no-install-recommends slurmctld slurmd slurm-client munge"
done

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
mkdir -p "$1"
state=$(cd "$1" && pwd)
wait_s=60

if [[ -e $state/slurmctld.pid ]] && kill -0 "$(cat "$state/slurmctld.pid")" 2>/dev/null; then
    die "a cluster is already running from $state (stop it with cluster/stop_local_slurm.sh $state)"
fi
# A real configuration would win over ours inside jobs.
[[ ! -e /etc/slurm/slurm.conf ]] || die "/etc/slurm/slurm.conf exists: this machine has its own SLURM configuration"
# Take /run/slurm/conf only if it is free or left by an earlier test cluster
# (a symlink to a folder whose slurmctld is gone).
run_conf=/run/slurm/conf
if [[ -L $run_conf ]]; then
    old_state=$(readlink "$run_conf")
    if [[ $old_state != "$state" && -s $old_state/slurmctld.pid ]] && kill -0 "$(cat "$old_state/slurmctld.pid")" 2>/dev/null; then
        die "another test cluster is running from $old_state"
    fi
elif [[ -e $run_conf ]]; then
    die "$run_conf exists and is not a test cluster's symlink"
fi

# munged refuses folders that others can write to; clients of any user need
# to reach its socket, so the munge folder is world-traversable, the key not.
install -d -m 0755 "$state/munge" "$state/log"
install -d -m 0700 "$state/ctld" "$state/slurmd"

# The key is private to this cluster: every daemon and client here shares it.
if [[ ! -s $state/munge/munge.key ]]; then
    mungekey --create --keyfile="$state/munge/munge.key"
fi
chmod 0600 "$state/munge/munge.key"

# Hardware as slurmd sees it (CPUs, sockets, cores, threads, RealMemory),
# renamed to the loopback node that slurmd is started as (-N localhost).
node_hw=$(slurmd -C | head -n 1 | sed -E 's/^NodeName=[^ ]+ //')
[[ $node_hw == CPUs=* ]] || die "unexpected output from 'slurmd -C': $node_hw"
real_mem=$(sed -E 's/.*RealMemory=([0-9]+).*/\1/' <<<"$node_hw")
slurmd_parameters=""
if [[ -n ${SLURM_TEST_CPUS:-} ]]; then
    [[ $SLURM_TEST_CPUS =~ ^[1-9][0-9]*$ ]] || die "SLURM_TEST_CPUS must be a positive integer"
    # One socket of single-thread cores; slurmd is told to trust this over the hardware.
    node_hw="CPUs=$SLURM_TEST_CPUS Boards=1 SocketsPerBoard=1 CoresPerSocket=$SLURM_TEST_CPUS ThreadsPerCore=1 RealMemory=$real_mem"
    slurmd_parameters="SlurmdParameters=config_overrides"
fi
cpus=$(sed -E 's/.*CPUs=([0-9]+).*/\1/' <<<"$node_hw")
# Without a default, one job without a memory request would take the whole node.
def_mem_per_cpu=$(( real_mem / cpus / 4 ))

cat > "$state/slurm.conf" <<EOF
# Written by cluster/start_local_slurm.sh: a single-node test cluster.
ClusterName=corpusmill-test
SlurmctldHost=$(hostname -s)(127.0.0.1)
SlurmctldPort=6817
SlurmdPort=6818
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$state/munge/munge.socket
StateSaveLocation=$state/ctld
SlurmdSpoolDir=$state/slurmd
SlurmctldPidFile=$state/slurmctld.pid
SlurmdPidFile=$state/slurmd.pid
SlurmctldLogFile=$state/log/slurmctld.log
SlurmdLogFile=$state/log/slurmd.log
# No cgroups here: track job processes through /proc, bind no tasks.
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MpiDefault=none
SwitchType=switch/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU_Memory
DefMemPerCPU=$def_mem_per_cpu
# Finished jobs stay visible to squeue this long (seconds); the executor
# plugin polls squeue because there is no accounting database for sacct.
MinJobAge=600
ReturnToService=2
SlurmdTimeout=60
InactiveLimit=0
KillWait=10
MailProg=/bin/true
$slurmd_parameters
NodeName=localhost NodeAddr=127.0.0.1 $node_hw State=UNKNOWN
PartitionName=debug Nodes=localhost Default=YES MaxTime=INFINITE State=UP
EOF

export SLURM_CONF=$state/slurm.conf
mkdir -p "$(dirname "$run_conf")"
ln -sfn "$state" "$run_conf"

log_tails() {
    local f
    for f in "$state/log/munged.log" "$state/log/slurmctld.log" "$state/log/slurmd.log"; do
        [[ -e $f ]] || continue
        echo "--- last lines of $f" >&2
        tail -n 20 "$f" >&2
    done
}

# Report, show the logs, and stop whatever this run already started.
fail() {
    echo "start_local_slurm: $*" >&2
    log_tails
    bash "$here/stop_local_slurm.sh" "$state"
    exit 1
}

# Wait (bounded) until a daemon has written its pid file.
wait_pid_file() {
    local file=$1 name=$2 i
    for (( i = 0; i < 50; i++ )); do
        [[ -s $file ]] && kill -0 "$(cat "$file")" 2>/dev/null && return 0
        sleep 0.2
    done
    fail "$name did not start"
}

munged --force \
    --socket="$state/munge/munge.socket" \
    --key-file="$state/munge/munge.key" \
    --pid-file="$state/munged.pid" \
    --seed-file="$state/munge/munged.seed" \
    --log-file="$state/log/munged.log" </dev/null >/dev/null 2>&1 \
    || fail "munged failed to start"
wait_pid_file "$state/munged.pid" munged

# -c: forget jobs and node states left by an earlier run of this folder.
slurmctld -f "$state/slurm.conf" -c </dev/null >/dev/null 2>&1 || fail "slurmctld failed to start"
wait_pid_file "$state/slurmctld.pid" slurmctld

slurmd -f "$state/slurm.conf" -N localhost </dev/null >/dev/null 2>&1 || fail "slurmd failed to start"
wait_pid_file "$state/slurmd.pid" slurmd

deadline=$(( SECONDS + wait_s ))
node_state=""
while (( SECONDS < deadline )); do
    for daemon in munged slurmctld slurmd; do
        kill -0 "$(cat "$state/$daemon.pid" 2>/dev/null)" 2>/dev/null || fail "$daemon exited"
    done
    node_state=$(sinfo -h -n localhost -o %T 2>/dev/null || true)
    [[ $node_state == idle ]] && break
    sleep 1
done
[[ $node_state == idle ]] || fail "node not idle after ${wait_s}s (state: '${node_state:-none}')"

echo "SLURM test cluster up: $cpus CPUs, ${real_mem} MB on node localhost, partition debug"
echo "export SLURM_CONF=$state/slurm.conf"
