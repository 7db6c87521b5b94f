#!/usr/bin/env bash
# Start a one-node SLURM cluster on this machine, for tests/workflow/test_slurm.py.
#
# Run as root on Debian (CI does, from .ci/run).  It installs Debian's slurm-wlm and
# munge packages when missing, writes /etc/slurm/slurm.conf for one node named after
# `hostname -s` with this machine's CPUs and memory (no accounting database, as on many
# small group clusters; plugins chosen so that it also runs inside a container), starts
# munged, slurmctld and slurmd, and waits until `sinfo` shows the node idle.
#
# Idempotent: a cluster that already answers is left alone; running it again rewrites
# nothing that is unchanged and starts only the daemons that are not running.
# It always exits 0: when SLURM cannot run here (not root, no apt-get, daemons that do
# not start) it says why, and the SLURM test skips with the reason.
set -uo pipefail

CONF=/etc/slurm/slurm.conf
MARK="# written by pesflow .ci/slurm-up.sh"
PARTITION=pesflow
node=$(hostname -s)

say() { echo "slurm-up: $*"; }
give_up() {
    say "$*"
    say "no SLURM cluster here; tests/workflow/test_slurm.py will be skipped"
    exit 0
}
node_state() { sinfo -h -N -n "$node" -o %t 2> /dev/null | head -n 1; }
alive() { [[ -f $1 ]] && kill -0 "$(< "$1")" 2> /dev/null; }

state=$(timeout 10 sinfo -h -N -n "$node" -o %t 2> /dev/null | head -n 1)
if [[ $state == idle || $state == mix ]]; then
    say "SLURM already up: node $node is $state"
    exit 0
fi

[[ $(id -u) == 0 ]] || give_up "not root (needs to install packages and start daemons)"

if ! command -v slurmctld > /dev/null || ! command -v slurmd > /dev/null \
    || ! command -v munged > /dev/null; then
    command -v apt-get > /dev/null || give_up "slurm-wlm is not installed and apt-get is missing"
    say "installing slurm-wlm and munge (apt-get)"
    export DEBIAN_FRONTEND=noninteractive
    { apt-get update -qq && apt-get install -y -qq slurm-wlm munge > /dev/null; } \
        || give_up "apt-get install slurm-wlm munge failed"
fi

if [[ -f $CONF ]] && ! grep -qF "$MARK" "$CONF"; then
    give_up "$CONF exists and was not written by this script; not touching it"
fi

# This node as slurmd sees it (CPUs, sockets, cores, threads, RealMemory).
hw=$(slurmd -C 2> /dev/null | head -n 1)
if [[ $hw != NodeName=* ]]; then
    mem=$(awk '/^MemTotal:/ {print int($2 / 1024)}' /proc/meminfo)
    hw="NodeName=$node CPUs=$(nproc) RealMemory=$mem"
fi
# One node: daemons talk over the loopback, whether or not the host name resolves.
hw="NodeName=$node NodeAddr=127.0.0.1 ${hw#NodeName=* }"

conf="$MARK
# One node, no accounting database (sacct has nothing to ask), no cgroups (works
# inside a container): processes tracked by /proc, tasks not bound to cores.
ClusterName=pesflow-ci
SlurmctldHost=$node(127.0.0.1)
AuthType=auth/munge
SlurmUser=slurm
StateSaveLocation=/var/lib/slurm/slurmctld
SlurmdSpoolDir=/var/lib/slurm/slurmd
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
MpiDefault=none
SwitchType=switch/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
JobCompType=jobcomp/none
ReturnToService=2
$hw State=UNKNOWN
PartitionName=$PARTITION Nodes=$node Default=YES MaxTime=INFINITE State=UP"

restart=0
if [[ ! -f $CONF ]] || [[ $(< "$CONF") != "$conf" ]]; then
    mkdir -p /etc/slurm
    printf '%s\n' "$conf" > "$CONF.tmp" && mv "$CONF.tmp" "$CONF"
    say "wrote $CONF ($hw)"
    restart=1
fi
mkdir -p /var/lib/slurm/slurmctld /var/lib/slurm/slurmd /var/log/slurm
chown slurm:slurm /var/lib/slurm/slurmctld /var/log/slurm

# munge: the authentication both daemons and every client command use.
if ! munge -n 2> /dev/null | unmunge > /dev/null 2>&1; then
    mkdir -p /run/munge /var/log/munge /var/lib/munge
    chown munge:munge /run/munge /var/log/munge /var/lib/munge
    [[ -f /etc/munge/munge.key ]] || mungekey --create > /dev/null 2>&1 \
        || give_up "cannot create /etc/munge/munge.key"
    runuser -u munge -- /usr/sbin/munged --force || give_up "munged did not start"
    for _ in $(seq 20); do
        munge -n 2> /dev/null | unmunge > /dev/null 2>&1 && break
        sleep 0.5
    done
    munge -n 2> /dev/null | unmunge > /dev/null 2>&1 || give_up "munged does not answer"
    say "munged started"
fi

if ((restart)); then
    for pidfile in /run/slurmd.pid /run/slurmctld.pid; do
        alive "$pidfile" && kill "$(< "$pidfile")"
    done
    sleep 2
fi
if ! alive /run/slurmctld.pid; then
    slurmctld || give_up "slurmctld did not start (see /var/log/slurm/slurmctld.log)"
    say "slurmctld started"
fi
if ! alive /run/slurmd.pid; then
    slurmd || give_up "slurmd did not start (see /var/log/slurm/slurmd.log)"
    say "slurmd started"
fi

for i in $(seq 60); do
    state=$(node_state)
    [[ $state == idle || $state == mix ]] && break
    # A node that was down (e.g. after a restart) is put back once.
    if [[ $i == 10 && ($state == down* || $state == drain* || $state == drng*) ]]; then
        scontrol update NodeName="$node" State=RESUME 2> /dev/null
    fi
    sleep 1
done
if [[ $state != idle && $state != mix ]]; then
    tail -n 5 /var/log/slurm/slurmctld.log /var/log/slurm/slurmd.log 2> /dev/null
    give_up "node $node is '${state:-not known}' after 60 s, not idle"
fi
say "SLURM up: node $node is $state in partition $PARTITION ($hw)"
exit 0
