#!/usr/bin/env bash
# A single-node SLURM cluster on this machine, for the tests of the cluster path (and for trying it out).
#
# Idempotent: run it as often as you like; it installs what is missing (Debian packages slurmctld, slurmd,
# slurm-client, munge and slurm-wlm-torque, whose qsub/qstat stand in for a PBS scheduler), writes the
# configuration, starts munged, slurmctld and slurmd directly (no systemd) and waits until the node
# takes jobs. Needs root. Exit status 0 when `sinfo` shows the node ready, 1 otherwise (with the reason);
# callers that can live without a scheduler (CI) go on, and the tests that need one skip.
#
# Facts this relies on (a container without systemd or cgroups): process tracking through /proc
# (proctrack/linuxproc), no task binding (task/none), no accounting gather, and cores and memory as
# consumable resources (select/cons_tres, CR_Core_Memory) so that several jobs share the one node.
set -euo pipefail

say() { echo "single-node-slurm: $*" >&2; }
fail() { say "$*"; exit 1; }

[ "$(id -u)" -eq 0 ] || fail "must run as root (it installs packages and starts daemons)"

HOST=$(hostname -s)
CONF_DIR=/etc/slurm
STATE_DIR=/var/lib/slurm/slurmctld
SPOOL_DIR=/var/lib/slurm/slurmd
LOG_DIR=/var/log/slurm
RUN_DIR=/run/slurm

node_ready() {
    # the node answers and takes jobs: idle, mixed or allocated
    local state
    state=$(sinfo -h -n "$HOST" -o '%T' 2>/dev/null | head -n1) || return 1
    case "$state" in idle*|mix*|alloc*|completing*) return 0 ;; *) return 1 ;; esac
}

if command -v sinfo >/dev/null 2>&1 && node_ready; then
    say "node $HOST already ready"
    exit 0
fi

# ---------------------------------------------------------------- packages
packages=(slurmctld slurmd slurm-client munge slurm-wlm-torque)
missing=()
for p in "${packages[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ "${#missing[@]}" -gt 0 ]; then
    command -v apt-get >/dev/null 2>&1 || fail "apt-get not found: install ${missing[*]} by hand"
    say "installing ${missing[*]}"
    export DEBIAN_FRONTEND=noninteractive
    # no daemon is started by the packages' own scripts: this script starts them itself
    printf '#!/bin/sh\nexit 101\n' > /usr/sbin/policy-rc.d && chmod +x /usr/sbin/policy-rc.d
    trap 'rm -f /usr/sbin/policy-rc.d' EXIT
    timeout 300 apt-get update -qq >/dev/null || fail "apt-get update failed (no package registry?)"
    timeout 600 apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null \
        || fail "apt-get install ${missing[*]} failed"
    rm -f /usr/sbin/policy-rc.d
fi

# ---------------------------------------------------------------- munge
install -d -o munge -g munge -m 0700 /etc/munge /var/lib/munge /var/log/munge
install -d -o munge -g munge -m 0755 /run/munge
if [ ! -s /etc/munge/munge.key ]; then
    dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none
fi
chown munge:munge /etc/munge/munge.key
chmod 0400 /etc/munge/munge.key
if ! munge -n 2>/dev/null | unmunge >/dev/null 2>&1; then
    pkill -u munge -x munged 2>/dev/null || true
    rm -f /run/munge/munged.pid /run/munge/munge.socket.2*
    runuser -u munge -- /usr/sbin/munged
    for _ in $(seq 50); do munge -n 2>/dev/null | unmunge >/dev/null 2>&1 && break; sleep 0.1; done
    munge -n | unmunge >/dev/null || fail "munged does not answer"
fi

# ---------------------------------------------------------------- configuration
install -d -o slurm -g slurm -m 0755 "$STATE_DIR" "$LOG_DIR" "$RUN_DIR"
install -d -m 0755 "$SPOOL_DIR" "$CONF_DIR"
# the node's own topology (CPUs, sockets, cores, threads, memory), as slurmd sees it
topology=$(slurmd -C | head -n1 | sed -e 's/^NodeName=[^ ]* //' -e 's/ UpTime=.*//')
[ -n "$topology" ] || fail "slurmd -C gave no node topology"
conf=$(cat <<EOF
# written by scripts/single-node-slurm.sh: one node that is both controller and compute node
ClusterName=single
SlurmctldHost=$HOST
SlurmUser=slurm
AuthType=auth/munge
StateSaveLocation=$STATE_DIR
SlurmdSpoolDir=$SPOOL_DIR
SlurmctldPidFile=$RUN_DIR/slurmctld.pid
SlurmdPidFile=$RUN_DIR/slurmd.pid
SlurmctldLogFile=$LOG_DIR/slurmctld.log
SlurmdLogFile=$LOG_DIR/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
MpiDefault=none
SchedulerType=sched/backfill
NodeName=$HOST $topology State=UNKNOWN
PartitionName=batch Nodes=$HOST Default=YES MaxTime=INFINITE State=UP OverSubscribe=NO
EOF
)
if [ ! -f "$CONF_DIR/slurm.conf" ] || [ "$(cat "$CONF_DIR/slurm.conf")" != "$conf" ]; then
    printf '%s\n' "$conf" > "$CONF_DIR/slurm.conf"
    changed=1
else
    changed=0
fi

# ---------------------------------------------------------------- daemons
running() { pgrep -x "$1" >/dev/null 2>&1; }
if [ "$changed" -eq 1 ]; then
    pkill -x slurmd 2>/dev/null || true
    pkill -x slurmctld 2>/dev/null || true
    sleep 1
fi
running slurmctld || slurmctld || fail "slurmctld did not start (see $LOG_DIR/slurmctld.log)"
running slurmd || slurmd || fail "slurmd did not start (see $LOG_DIR/slurmd.log)"

for _ in $(seq 60); do
    node_ready && break
    state=$(sinfo -h -n "$HOST" -o '%T' 2>/dev/null | head -n1 || true)
    case "$state" in down*|drain*) scontrol update NodeName="$HOST" State=RESUME 2>/dev/null || true ;; esac
    sleep 1
done
node_ready || fail "node $HOST is not ready: $(sinfo -h -N -o '%N %T %E' 2>&1 | head -n3)"
say "node $HOST ready: $(sinfo -h -N -o '%N %c CPUs %m MB %T')"
