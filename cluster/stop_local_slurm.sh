#!/usr/bin/env bash
# Stop the test cluster started by cluster/start_local_slurm.sh STATE_DIR.
#
# Usage: cluster/stop_local_slurm.sh STATE_DIR
#
# First cancels the jobs still queued or running on this cluster (so no job
# outlives it), then signals only the daemons whose pid files are in
# STATE_DIR (slurmd, then slurmctld, then munged), and only while the pid
# still belongs to a process of that name: SIGTERM first, SIGKILL 15 s
# later. Safe to run twice or on a folder whose start failed half-way.
# Finally removes the symlink /run/slurm/conf if it points to STATE_DIR.
set -uo pipefail

[[ $# -eq 1 ]] || { echo "usage: $0 STATE_DIR" >&2; exit 2; }
state=$1
wait_s=15

# Print the pid recorded in FILE if that process is still NAME.
live_pid() {
    local file=$1 name=$2 pid
    [[ -s $file ]] || return 1
    pid=$(cat "$file")
    [[ $pid =~ ^[0-9]+$ ]] || return 1
    [[ $(cat "/proc/$pid/comm" 2>/dev/null) == "$name" ]] || return 1
    echo "$pid"
}

stop_daemon() {
    local name=$1 file=$state/$1.pid pid i
    pid=$(live_pid "$file" "$name") || { rm -f "$file"; return 0; }
    kill -TERM "$pid" 2>/dev/null
    for (( i = 0; i < wait_s * 5; i++ )); do
        kill -0 "$pid" 2>/dev/null || { rm -f "$file"; return 0; }
        sleep 0.2
    done
    echo "stop_local_slurm: $name ($pid) ignored SIGTERM for ${wait_s}s; sending SIGKILL" >&2
    kill -KILL "$pid" 2>/dev/null
    rm -f "$file"
}

# Cancel this cluster's unfinished jobs and wait (bounded) until they are gone.
if live_pid "$state/slurmctld.pid" slurmctld >/dev/null && live_pid "$state/slurmd.pid" slurmd >/dev/null; then
    export SLURM_CONF=$state/slurm.conf
    jobs=$(timeout 10 squeue -h -t PENDING,RUNNING,CONFIGURING,COMPLETING -o %i 2>/dev/null)
    if [[ -n $jobs ]]; then
        # shellcheck disable=SC2086  # one argument per job id
        timeout 10 scancel $jobs
        for (( i = 0; i < wait_s * 5; i++ )); do
            [[ -z $(timeout 10 squeue -h -t PENDING,RUNNING,CONFIGURING,COMPLETING -o %i 2>/dev/null) ]] && break
            sleep 0.2
        done
    fi
fi

stop_daemon slurmd
stop_daemon slurmctld
stop_daemon munged

# Remove the configuration symlink if it is this cluster's.
[[ -L /run/slurm/conf && $(readlink /run/slurm/conf) == "$(cd "$state" 2>/dev/null && pwd)" ]] && rm -f /run/slurm/conf
exit 0
