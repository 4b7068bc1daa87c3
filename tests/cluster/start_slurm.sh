#!/usr/bin/env bash
# A single-node SLURM on localhost for the cluster tests.
#
#   bash tests/cluster/start_slurm.sh start STATE_DIR   install if needed, configure, start, wait until idle
#   bash tests/cluster/start_slurm.sh stop  STATE_DIR   stop what `start` started (by the recorded PIDs)
#
# STATE_DIR receives slurm.conf, spool/state/log folders and `pids` (one "name pid" per line, only
# daemons this script started). The configuration is linked to /etc/slurm/slurm.conf because the
# executor's job step clears SLURM_* variables, so SLURM_CONF would not reach the job.
#
# Exit codes: 0 ok, 2 usage, 3 packages missing and not root (message says what to run),
#             4 a site configuration exists at /etc/slurm/slurm.conf (left alone), 5 start failed.
set -uo pipefail

PKGS=(slurmctld slurmd slurm-client munge)
CONF_LINK=/etc/slurm/slurm.conf

say() { printf '[slurm-local] %s\n' "$*" >&2; }

missing_pkgs() {
  local out=() p
  for p in "${PKGS[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || out+=("$p")
  done
  echo "${out[@]:-}"
}

install_pkgs() {
  local miss; miss="$(missing_pkgs)"
  [[ -z "$miss" ]] && return 0
  if [[ "$(id -u)" != 0 ]]; then
    say "missing Debian packages: $miss"
    say "run as root: apt-get install -y --no-install-recommends -o DPkg::Lock::Timeout=300 $miss"
    exit 3
  fi
  say "apt-get install $miss"
  # shellcheck disable=SC2086
  if ! apt-get install -y -q --no-install-recommends -o DPkg::Lock::Timeout=300 $miss >/dev/null; then
    apt-get update -q -o DPkg::Lock::Timeout=300 >/dev/null
    # shellcheck disable=SC2086
    apt-get install -y -q --no-install-recommends -o DPkg::Lock::Timeout=300 $miss >/dev/null || exit 5
  fi
}

pid_alive() { [[ -n "${1:-}" ]] && kill -0 "$1" 2>/dev/null; }

wait_for_file() {  # $1 path, $2 tenths of a second
  local i
  for ((i = 0; i < $2; i++)); do [[ -s "$1" ]] && return 0; sleep 0.1; done
  return 1
}

write_conf() {
  local dir="$1" host cpus mem_mb
  host="$(hostname -s)"
  cpus="$(nproc)"
  # about 80 % of the currently free memory (MB), so the node does not promise what the machine lacks
  mem_mb="$(awk '/^MemAvailable:/ {printf "%d", $2 / 1024 * 0.8}' /proc/meminfo)"
  cat > "$dir/slurm.conf" <<EOF
# single-node SLURM for bodysweep's cluster tests (written by tests/cluster/start_slurm.sh)
ClusterName=bodysweep-local
SlurmctldHost=${host}(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/filetxt
JobCompLoc=${dir}/log/jobcomp.txt
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
DefMemPerCPU=500
MinJobAge=300
ReturnToService=2
SlurmctldPort=6817
SlurmdPort=6818
StateSaveLocation=${dir}/state
SlurmdSpoolDir=${dir}/spool
SlurmctldPidFile=${dir}/run/slurmctld.pid
SlurmdPidFile=${dir}/run/slurmd.pid
SlurmctldLogFile=${dir}/log/slurmctld.log
SlurmdLogFile=${dir}/log/slurmd.log
SlurmctldDebug=info
SlurmdDebug=info
NodeName=${host} NodeAddr=127.0.0.1 CPUs=${cpus} RealMemory=${mem_mb} State=UNKNOWN
PartitionName=local Nodes=${host} Default=YES MaxTime=INFINITE State=UP
PartitionName=bulk Nodes=${host} Default=NO MaxTime=INFINITE State=UP
EOF
}

start() {
  local dir="$1"
  install_pkgs
  mkdir -p "$dir"/{state,spool,run,log}
  dir="$(cd "$dir" && pwd)"
  : > "$dir/pids"

  if [[ -e "$CONF_LINK" && ! -L "$CONF_LINK" ]]; then
    say "$CONF_LINK is a real file (a site configuration?); not touching it"
    exit 4
  fi
  write_conf "$dir"
  mkdir -p "$(dirname "$CONF_LINK")"
  ln -sfn "$dir/slurm.conf" "$CONF_LINK"

  # munge: reuse a running daemon on the default socket, else start one as the munge user
  if munge -n </dev/null 2>/dev/null | unmunge >/dev/null 2>&1; then
    say "munged already running; reusing it"
  else
    [[ -s /etc/munge/munge.key ]] || { runuser -u munge -- mungekey --create --keyfile=/etc/munge/munge.key || exit 5; }
    mkdir -p /run/munge && chown munge:munge /run/munge && chmod 0755 /run/munge
    # munged runs as the munge user, which cannot enter a root-only temporary folder: its log, seed
    # and PID file stay in the package's own folders
    mkdir -p /var/log/munge /var/lib/munge && chown munge:munge /var/log/munge /var/lib/munge
    rm -f /run/munge/munged.pid
    runuser -u munge -- /usr/sbin/munged --force || { say "munged did not start"; exit 5; }
    wait_for_file /run/munge/munged.pid 50 || { say "munged wrote no PID file"; exit 5; }
    echo "munged $(cat /run/munge/munged.pid)" >> "$dir/pids"
  fi

  /usr/sbin/slurmctld || { say "slurmctld did not start; see $dir/log/slurmctld.log"; exit 5; }
  wait_for_file "$dir/run/slurmctld.pid" 100 || { say "slurmctld wrote no PID file"; exit 5; }
  echo "slurmctld $(cat "$dir/run/slurmctld.pid")" >> "$dir/pids"

  /usr/sbin/slurmd || { say "slurmd did not start; see $dir/log/slurmd.log"; exit 5; }
  wait_for_file "$dir/run/slurmd.pid" 100 || { say "slurmd wrote no PID file"; exit 5; }
  echo "slurmd $(cat "$dir/run/slurmd.pid")" >> "$dir/pids"

  local i state=""
  for ((i = 0; i < 300; i++)); do
    state="$(sinfo -h -o %t 2>/dev/null | head -1)"
    [[ "$state" == idle ]] && { say "node $(hostname -s) idle after $((i / 10)).$((i % 10)) s"; return 0; }
    sleep 0.1
  done
  say "node did not become idle (state '$state'); see $dir/log/"
  exit 5
}

stop() {
  local dir="$1" name pid i
  [[ -f "$dir/pids" ]] || return 0
  # reverse order: slurmd, slurmctld, munged
  tac "$dir/pids" | while read -r name pid; do
    if pid_alive "$pid"; then
      kill -TERM "$pid" 2>/dev/null
      for ((i = 0; i < 100; i++)); do pid_alive "$pid" || break; sleep 0.1; done
      pid_alive "$pid" && kill -KILL "$pid" 2>/dev/null
    fi
  done
  : > "$dir/pids"
  if [[ -L "$CONF_LINK" && "$(readlink "$CONF_LINK")" == "$dir/slurm.conf" ]]; then
    rm -f "$CONF_LINK"
  fi
}

case "${1:-}" in
  start) [[ -n "${2:-}" ]] || { echo "usage: $0 start STATE_DIR" >&2; exit 2; }; start "$2" ;;
  stop)  [[ -n "${2:-}" ]] || { echo "usage: $0 stop STATE_DIR" >&2; exit 2; }; stop "$(cd "$2" 2>/dev/null && pwd || echo "$2")" ;;
  *) echo "usage: $0 {start|stop} STATE_DIR" >&2; exit 2 ;;
esac
