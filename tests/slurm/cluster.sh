#!/usr/bin/env bash
# A one-node Slurm cluster for the job-array test (tests/test_slurm.py), on this machine only:
#   cluster.sh start DIR   writes DIR/slurm.conf, starts munged (if not running), slurmctld, slurmd
#   cluster.sh stop DIR    stops the two Slurm daemons by their pid files
# Needs Debian's slurm-wlm and munge (scripts/common.sh ensure_slurm) and root (or sudo): slurmd
# runs jobs as their user. The configuration lives in DIR (SLURM_CONF=DIR/slurm.conf); nothing
# under /etc/slurm is touched. No cgroups: processes are tracked through /proc.
set -euo pipefail
action=$1
dir=$(realpath "$2")
if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
host=$(hostname -s)

start() {
  mkdir -p "$dir/state" "$dir/spool"
  if [ ! -s /etc/munge/munge.key ]; then
    $SUDO mungekey --create --keyfile=/etc/munge/munge.key
    $SUDO chown munge:munge /etc/munge/munge.key
    $SUDO chmod 0400 /etc/munge/munge.key
  fi
  if ! pgrep -x munged >/dev/null; then
    $SUDO mkdir -p /run/munge
    $SUDO chown munge:munge /run/munge
    $SUDO runuser -u munge -- /usr/sbin/munged
  fi
  cat > "$dir/slurm.conf" <<CONF
ClusterName=patchgraph-test
SlurmctldHost=$host
SlurmUser=root
AuthType=auth/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
StateSaveLocation=$dir/state
SlurmdSpoolDir=$dir/spool
SlurmctldPidFile=$dir/slurmctld.pid
SlurmdPidFile=$dir/slurmd.pid
SlurmctldLogFile=$dir/slurmctld.log
SlurmdLogFile=$dir/slurmd.log
ReturnToService=2
NodeName=$host CPUs=$(nproc) State=UNKNOWN
PartitionName=main Nodes=$host Default=YES MaxTime=INFINITE State=UP
CONF
  $SUDO slurmctld -c -f "$dir/slurm.conf"
  $SUDO slurmd -f "$dir/slurm.conf"
  # Ready when the node is idle (a few seconds).
  for _ in $(seq 60); do
    if SLURM_CONF="$dir/slurm.conf" sinfo -h -o %t 2>/dev/null | grep -q idle; then exit 0; fi
    sleep 0.5
  done
  echo "the Slurm node did not come up; see $dir/slurmctld.log and $dir/slurmd.log" >&2
  exit 1
}

stop() {
  for d in slurmd slurmctld; do
    if [ -s "$dir/$d.pid" ]; then
      pid=$(cat "$dir/$d.pid")
      $SUDO kill "$pid" 2>/dev/null || true
      for _ in $(seq 40); do kill -0 "$pid" 2>/dev/null || break; sleep 0.25; done
    fi
  done
}

case $action in
  start) start ;;
  stop) stop ;;
  *) echo "usage: cluster.sh start|stop DIR" >&2; exit 2 ;;
esac
