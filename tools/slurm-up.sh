#!/usr/bin/env bash
# Start a single-node SLURM on this machine for the `slurm` tests (CI, or
# `make test` as root). Needs root and Debian's slurm-wlm and munge packages.
#
# Idempotent: when a controller already answers (`scontrol ping`), nothing is
# changed. An existing /etc/slurm/slurm.conf is never replaced; ours is
# written only where there is none. Facts that work on Debian 12's 22.05
# packages as root on a machine without systemd: proctrack/linuxproc,
# task/none, select/cons_tres, SlurmUser=root, and munge's key created
# before munged starts.
#
# usage: tools/slurm-up.sh          start (or reuse) the daemons, wait for the node
#        tools/slurm-up.sh --conf   print the configuration it would write
set -euo pipefail

say() { echo "+ $*" >&2; }
run() { say "$@"; "$@"; }

NODE="$(hostname -s)"
CPUS="$(nproc)"
MEM_MB="$(awk '/^MemTotal:/ {printf "%d", $2 / 1024}' /proc/meminfo)"
CONF=/etc/slurm/slurm.conf

conf() {
    cat <<CONF
# Single-node SLURM for underfloor's tests — written by tools/slurm-up.sh
ClusterName=underfloor
SlurmctldHost=$NODE
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CryptoType=crypto/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/backfill
MpiDefault=none
ReturnToService=2
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
JobCompType=jobcomp/none
KillWait=30
MinJobAge=600
SchedulerParameters=batch_sched_delay=0,sched_min_interval=100000
NodeName=$NODE CPUs=$CPUS RealMemory=$MEM_MB State=UNKNOWN
PartitionName=main Nodes=$NODE Default=YES MaxTime=INFINITE State=UP
CONF
}

if [ "${1:-}" = "--conf" ]; then conf; exit 0; fi

if command -v scontrol >/dev/null 2>&1 && scontrol ping 2>/dev/null | grep -q "is UP"; then
    echo "slurm-up: a SLURM controller already answers; using it" >&2
    exit 0
fi
if [ "$(id -u)" != "0" ]; then
    echo "slurm-up: needs root to configure and start SLURM; run: sudo $0" >&2
    exit 2
fi
for b in slurmctld slurmd munged sbatch; do
    if ! command -v "$b" >/dev/null 2>&1; then
        echo "slurm-up: $b not found; install: apt-get install -y --no-install-recommends slurm-wlm munge" >&2
        exit 2
    fi
done

# munge: a key first, then the daemon (as its own user)
if [ ! -s /etc/munge/munge.key ]; then
    run mungekey --create --keyfile=/etc/munge/munge.key
    run chown munge:munge /etc/munge/munge.key
    run chmod 400 /etc/munge/munge.key
fi
run install -d -o munge -g munge -m 0755 /run/munge
if ! pgrep -x munged >/dev/null; then
    run runuser -u munge -- /usr/sbin/munged
fi

if [ ! -f "$CONF" ]; then
    say "writing $CONF"
    conf > "$CONF"
fi
run install -d -m 0755 /var/spool/slurmctld /var/spool/slurmd /var/log/slurm
pgrep -x slurmctld >/dev/null || run slurmctld
pgrep -x slurmd >/dev/null || run slurmd

for _ in $(seq 1 60); do
    state="$(sinfo -h -n "$NODE" -o %t 2>/dev/null || true)"
    case "$state" in
        idle*|mix*|alloc*) echo "slurm-up: node $NODE is $state" >&2; exit 0 ;;
        down*|drain*) run scontrol update nodename="$NODE" state=resume || true ;;
    esac
    sleep 1
done
echo "slurm-up: the node did not become idle; see /var/log/slurm/slurmctld.log and slurmd.log" >&2
exit 1
