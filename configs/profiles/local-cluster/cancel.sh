#!/usr/bin/env bash
# Stand-in job cancellation: kill the process group of each job id given.
#
# Usage (Snakemake calls it when a run is interrupted): cancel.sh JOBID [JOBID ...]
# SIGTERM first, then SIGKILL for whatever is still alive after a moment.
set -uo pipefail

state=${PESFLOW_LOCAL_CLUSTER_DIR:-.local-cluster}
groups=()
for id in "$@"; do
    pidfile=$state/$id/pid
    [[ -f $pidfile ]] || continue
    pgid=$(< "$pidfile")
    # the job's pid is its process group id (setsid in submit.sh)
    kill -TERM -- "-$pgid" 2> /dev/null && groups+=("$pgid")
done
[[ ${#groups[@]} -gt 0 ]] || exit 0
sleep 1
for pgid in "${groups[@]}"; do
    kill -KILL -- "-$pgid" 2> /dev/null
done
exit 0
