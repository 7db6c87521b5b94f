#!/usr/bin/env bash
# Stand-in "sbatch" for the generic cluster executor: run a Snakemake job script on
# this machine, detached from Snakemake, the way a batch system would.
#
# Usage (Snakemake calls it): submit.sh JOBSCRIPT
# Prints the job id on its first line (the only line), as the executor expects.
#
# Each job gets a folder $PESFLOW_LOCAL_CLUSTER_DIR/<id>/ (default: .local-cluster/
# under Snakemake's working folder) holding:
#   jobscript.sh  a copy of the job script (Snakemake deletes its own copy at exit)
#   pid           the process id of the job, which is also its process group and session
#   output.log    the job's stdout and stderr
#   exit_code     written when the job script ends (status.sh reads it)
set -euo pipefail

jobscript=${1:?usage: submit.sh JOBSCRIPT}
state=${PESFLOW_LOCAL_CLUSTER_DIR:-.local-cluster}
mkdir -p "$state"
jobdir=$(mktemp -d "$state/job-XXXXXXXX")
id=$(basename "$jobdir")
cp "$jobscript" "$jobdir/jobscript.sh"
jobdir=$(cd "$jobdir" && pwd)

# setsid: the job is its own session and process group, so it survives the end of
# Snakemake (as a real cluster job would) and cancel.sh can kill the whole group.
# nohup and the redirections: no terminal, and no inherited pipe, so Snakemake's read
# of this script's output is not held open by the job.
setsid nohup bash -c '
    echo $$ > "$1/pid"
    bash "$1/jobscript.sh"
    rc=$?
    echo "$rc" > "$1/exit_code.tmp" && mv "$1/exit_code.tmp" "$1/exit_code"
' local-cluster-job "$jobdir" < /dev/null > "$jobdir/output.log" 2>&1 &

echo "$id"
