#!/usr/bin/env bash
# Stand-in job status query: prints exactly one of running / success / failed.
#
# Usage (Snakemake calls it): status.sh JOBID
#   success  the job script ended with exit code 0
#   failed   it ended with another code, or its process is gone without a code
#            (killed, e.g. by cancel.sh or the OOM killer)
#   running  otherwise (also while the job has not yet written its pid)
# PESFLOW_LOCAL_CLUSTER_STUCK=1 makes it answer "running" for every job, ended or not,
# as a status query that cannot see finished jobs does (the SLURM plugin's sacct on a
# cluster without accounting storage); tests/workflow/test_cluster.py uses it.
set -uo pipefail

if [[ ${PESFLOW_LOCAL_CLUSTER_STUCK:-} == 1 ]]; then
    echo running
    exit 0
fi

alive() {
    # kill -0 also succeeds on a zombie (ended, not yet reaped by its new parent)
    kill -0 "$1" 2> /dev/null || return 1
    [[ -r /proc/$1/stat ]] || return 0
    local stat
    stat=$(< "/proc/$1/stat")
    stat=${stat##*) }
    [[ ${stat%% *} != Z ]]
}

id=${1:?usage: status.sh JOBID}
jobdir=${PESFLOW_LOCAL_CLUSTER_DIR:-.local-cluster}/$id
if [[ ! -d $jobdir ]]; then
    echo failed
    exit 0
fi
if [[ -f $jobdir/exit_code ]]; then
    if [[ $(< "$jobdir/exit_code") == 0 ]]; then echo success; else echo failed; fi
    exit 0
fi
if [[ -f $jobdir/pid ]] && ! alive "$(< "$jobdir/pid")"; then
    # The exit code is written just before the process ends: look once more.
    if [[ -f $jobdir/exit_code && $(< "$jobdir/exit_code") == 0 ]]; then
        echo success
    else
        echo failed
    fi
    exit 0
fi
echo running
