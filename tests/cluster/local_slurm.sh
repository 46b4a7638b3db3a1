#!/usr/bin/env bash
# A single-node SLURM on this machine, from Debian's packages, for tests/test_slurm.py and for trying the
# slurm profile by hand. Everything (configuration, munge key and socket, state, logs) lives in one
# folder, except one link: /etc/slurm/slurm.conf -> DIR/slurm.conf, made only where no SLURM configuration
# exists and removed by `stop` (the executor plugin's job step removes SLURM_CONF from the environment of
# the `srun` inside each job, so that srun reads the default path, as on a real cluster's compute node).
# No accounting database is set up: the Snakemake SLURM
# executor plugin queries job states with squeue when sacct has no database behind it, and the finished
# jobs are recorded by slurmctld's job-completion log (JobCompType=jobcomp/filetxt) instead.
#
#   tests/cluster/local_slurm.sh install        # apt-get install the daemons and clients (root)
#   tests/cluster/local_slurm.sh start DIR      # munged + slurmctld + slurmd, then waits for the node
#   source DIR/env                              # SLURM_CONF for sbatch/squeue/scancel (and snakemake)
#   tests/cluster/local_slurm.sh stop DIR       # stops the three daemons started for DIR
#
# Settings (environment): SLURM_CPUS (default: nproc), SLURM_MEM_MB (default: total memory less 2 GB),
# SLURM_PORT_BASE (slurmctld port; slurmd uses the next one; default 16817).
# Daemons are started directly (a container has no systemd); they run as root, so the script needs root.
set -euo pipefail

die() { echo "local_slurm: $*" >&2; exit 1; }

install_packages() {
    [ "$(id -u)" = 0 ] || die "installing needs root"
    command -v apt-get >/dev/null 2>&1 || die "no apt-get on this machine"
    if command -v slurmctld >/dev/null && command -v slurmd >/dev/null && command -v munged >/dev/null \
        && command -v sbatch >/dev/null; then
        return 0
    fi
    export DEBIAN_FRONTEND=noninteractive
    # The split packages: controller, node daemon, client commands and munge (slurm-wlm pulls in more).
    apt-get install -y -q --no-install-recommends slurmctld slurmd slurm-client munge >/dev/null \
        || { apt-get update -q >/dev/null && apt-get install -y -q --no-install-recommends \
                 slurmctld slurmd slurm-client munge >/dev/null; } \
        || die "apt-get could not install slurmctld slurmd slurm-client munge"
}

wait_for() {   # wait_for SECONDS DESCRIPTION COMMAND...
    local limit=$1 what=$2; shift 2
    local t=0
    until "$@" >/dev/null 2>&1; do
        sleep 0.5; t=$((t + 1))
        [ "$t" -lt $((limit * 2)) ] || return 1
    done
}

start() {
    local dir=$1
    [ "$(id -u)" = 0 ] || die "starting the daemons needs root (they run as root here)"
    for exe in munged slurmctld slurmd sbatch squeue scontrol; do
        command -v "$exe" >/dev/null || die "$exe not found (run: $0 install)"
    done
    mkdir -p "$dir"
    dir=$(cd "$dir" && pwd)
    chmod 0755 "$dir"
    mkdir -p "$dir/munge" "$dir/state" "$dir/spool" "$dir/log"
    chmod 0700 "$dir/munge"
    local host cpus mem port
    host=$(hostname -s)
    cpus=${SLURM_CPUS:-$(nproc)}
    mem=${SLURM_MEM_MB:-$(( $(awk '/MemTotal/ {print int($2 / 1024)}' /proc/meminfo) - 2048 ))}
    port=${SLURM_PORT_BASE:-16817}

    # munge: a key of our own and a socket in DIR, so an installed munged (if any) is left alone.
    [ -s "$dir/munge/munge.key" ] || { dd if=/dev/urandom of="$dir/munge/munge.key" bs=1024 count=1 2>/dev/null; }
    chmod 0400 "$dir/munge/munge.key"
    munged --force --socket="$dir/munge/munge.socket" --key-file="$dir/munge/munge.key" \
        --pid-file="$dir/munge/munged.pid" --log-file="$dir/log/munged.log" \
        --seed-file="$dir/munge/munged.seed" || die "munged did not start (see $dir/log/munged.log)"
    wait_for 10 munge munge --socket="$dir/munge/munge.socket" -n || die "munged does not answer"

    cat >"$dir/slurm.conf" <<EOF
# written by tests/cluster/local_slurm.sh
ClusterName=chairqm-local
SlurmctldHost=$host(127.0.0.1)
SlurmctldPort=$port
SlurmdPort=$((port + 1))
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$dir/munge/munge.socket
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/log/slurmctld.log
SlurmdLogFile=$dir/log/slurmd.log
SlurmctldDebug=info
SlurmdDebug=info
# no cgroups in a container: plain process tracking, no task binding
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
MpiDefault=none
JobAcctGatherType=jobacct_gather/linux
JobAcctGatherFrequency=5
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/filetxt
JobCompLoc=$dir/log/jobcomp.log
# cores and memory are consumable: a job asking for more than the node has is refused at sbatch
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
# keep finished jobs visible to squeue for an hour (the executor plugin reads their states from it)
MinJobAge=3600
ReturnToService=2
SchedulerType=sched/backfill
SchedulerParameters=sched_interval=2
NodeName=$host NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=local Nodes=$host Default=YES MaxTime=INFINITE State=UP
EOF
    cat >"$dir/env" <<EOF
export SLURM_CONF=$dir/slurm.conf
EOF
    export SLURM_CONF=$dir/slurm.conf
    local etc=/etc/slurm/slurm.conf
    if [ -L "$etc" ] && [ "$(readlink "$etc")" != "$dir/slurm.conf" ] && [ ! -e "$etc" ]; then
        rm -f "$etc"                                    # a dangling link left by an earlier start
    fi
    if [ -e "$etc" ] || [ -L "$etc" ]; then
        [ "$(readlink "$etc" || true)" = "$dir/slurm.conf" ] \
            || die "$etc exists: this machine has a SLURM configuration of its own; not touching it"
    else
        mkdir -p /etc/slurm && ln -s "$dir/slurm.conf" "$etc"
    fi
    slurmctld -f "$dir/slurm.conf" || die "slurmctld did not start (see $dir/log/slurmctld.log)"
    wait_for 20 slurmctld scontrol ping || die "slurmctld does not answer (see $dir/log/slurmctld.log)"
    slurmd -f "$dir/slurm.conf" || die "slurmd did not start (see $dir/log/slurmd.log)"
    node_idle() { sinfo -h -N -o '%T' | grep -q '^idle'; }
    wait_for 30 "idle node" node_idle || die "the node did not become idle: $(sinfo -h -N -o '%T %E') (see $dir/log/)"
    echo "local_slurm: up in $dir (node $host, $cpus CPUs, $mem MB); source $dir/env"
}

stop_pid() {   # stop_pid PIDFILE: SIGTERM, then SIGKILL after 10 s
    local f=$1 pid
    [ -s "$f" ] || return 0
    pid=$(cat "$f")
    kill -0 "$pid" 2>/dev/null || { rm -f "$f"; return 0; }
    kill -TERM "$pid" 2>/dev/null || true
    for _ in $(seq 20); do kill -0 "$pid" 2>/dev/null || break; sleep 0.5; done
    kill -0 "$pid" 2>/dev/null && kill -KILL "$pid" 2>/dev/null || true
    rm -f "$f"
}

stop() {
    local dir=$1
    [ -d "$dir" ] || return 0
    dir=$(cd "$dir" && pwd)
    if [ -s "$dir/slurm.conf" ] && [ -s "$dir/slurmctld.pid" ]; then
        SLURM_CONF=$dir/slurm.conf timeout 20 scancel --full --state=RUNNING,PENDING -u "$(id -un)" 2>/dev/null || true
    fi
    stop_pid "$dir/slurmd.pid"
    stop_pid "$dir/slurmctld.pid"
    stop_pid "$dir/munge/munged.pid"
    local etc=/etc/slurm/slurm.conf
    if [ -L "$etc" ] && [ "$(readlink "$etc")" = "$dir/slurm.conf" ]; then rm -f "$etc"; fi
}

case "${1:-}" in
    install) install_packages ;;
    start) [ $# -eq 2 ] || die "usage: $0 start DIR"; start "$2" ;;
    stop) [ $# -eq 2 ] || die "usage: $0 stop DIR"; stop "$2" ;;
    *) die "usage: $0 install | start DIR | stop DIR" ;;
esac
