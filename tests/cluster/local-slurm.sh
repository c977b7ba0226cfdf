#!/usr/bin/env bash
# A real one-node Slurm cluster on this machine, for the sharded-batch integration test.
# Adapted from the team's verified recipe for this machine kind (Debian 12 packages, Slurm 22.05,
# root, no systemd; cgroup plugins avoided because the sandbox mixes cgroup v1 and v2).
#   local-slurm.sh start DIR   install if needed, write DIR/etc/slurm.conf, start munged, slurmctld, slurmd
#   local-slurm.sh stop DIR    stop the daemons it started, by the PIDs in their pid files
#
# After start:  export SLURM_CONF=DIR/etc/slurm.conf   then sbatch / squeue / scontrol work.
# Accounting is off: check finished jobs with 'scontrol -o show job ID' (kept for 300 s), not sacct.
# Array tasks see SLURM_ARRAY_TASK_ID and SLURM_ARRAY_TASK_COUNT; jobs inherit the environment.
# In a heredoc that writes a job script, escape \$SLURM_ARRAY_TASK_ID or it expands at submit time.
# A failed array task leaves a job with --dependency=afterok:ID --kill-on-invalid-dep=yes CANCELLED.
# The cgroup plugins are avoided on purpose (proctrack/linuxproc, task/none): the sandbox mixes cgroup v1 and v2.
set -euo pipefail
cmd=${1:?start|stop}; SL=${2:?state folder}

stop_pid() {
  [ -s "$1" ] || return 0
  local p; p=$(cat "$1")
  kill "$p" 2>/dev/null || return 0
  for _ in $(seq 1 50); do kill -0 "$p" 2>/dev/null || return 0; sleep 0.2; done
  kill -9 "$p" 2>/dev/null || true
}

case "$cmd" in
start)
  if ! command -v slurmctld >/dev/null; then
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq
    apt-get install -y -qq --no-install-recommends slurmctld slurmd slurm-client munge >/dev/null
  fi
  # only ever wipe a folder this script made (marker file) or an empty one
  if [ -e "$SL" ] && [ -n "$(ls -A "$SL" 2>/dev/null)" ] && [ ! -f "$SL/.local-slurm" ]; then
    echo "$SL is not empty and was not made by this script: choose another folder" >&2; exit 2
  fi
  rm -rf "$SL"; mkdir -p "$SL"/{etc,state/ctld,state/d,log,run}; touch "$SL/.local-slurm"
  node=$(slurmd -C | head -n1 | sed 's/^NodeName=[^ ]*/NodeName=localhost/')
  cat > "$SL/etc/slurm.conf" <<EOF
ClusterName=local
SlurmctldHost=localhost
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
ReturnToService=2
StateSaveLocation=$SL/state/ctld
SlurmdSpoolDir=$SL/state/d
SlurmctldPidFile=$SL/run/slurmctld.pid
SlurmdPidFile=$SL/run/slurmd.pid
SlurmctldLogFile=$SL/log/slurmctld.log
SlurmdLogFile=$SL/log/slurmd.log
$node NodeAddr=127.0.0.1 State=UNKNOWN
PartitionName=main Nodes=localhost Default=YES MaxTime=INFINITE State=UP
EOF
  export SLURM_CONF=$SL/etc/slurm.conf
  install -d -o munge -g munge -m 0755 /run/munge
  [ -s /etc/munge/munge.key ] || runuser -u munge -- mungekey --create
  if ! munge -n >/dev/null 2>&1; then
    runuser -u munge -- /usr/sbin/munged
    touch "$SL/run/munged.ours"          # stop only a munged that this script started
    for _ in $(seq 1 50); do munge -n >/dev/null 2>&1 && break; sleep 0.1; done
  fi
  /usr/sbin/slurmctld -i
  /usr/sbin/slurmd
  for _ in $(seq 1 300); do
    [ "$(sinfo -h -o %T 2>/dev/null)" = idle ] && { echo "slurm ready: export SLURM_CONF=$SLURM_CONF"; exit 0; }
    sleep 0.1
  done
  echo "slurm did not become idle" >&2; tail -n 30 "$SL"/log/*.log >&2; exit 1
  ;;
stop)
  stop_pid "$SL/run/slurmd.pid"; stop_pid "$SL/run/slurmctld.pid"
  [ -f "$SL/run/munged.ours" ] && stop_pid /run/munge/munged.pid
  rm -f "$SL/run/munged.ours"
  ;;
*) echo "usage: $0 start|stop DIR" >&2; exit 2 ;;
esac
