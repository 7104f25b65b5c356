#!/usr/bin/env bash
# A single-node Slurm for the cluster test (tests/cluster/slurm-run.test.ts), on a fresh Debian machine.
#
#   source .ci/slurm.sh && slurm_up      installs and starts munged, slurmctld, slurmd; exports
#                                        SONDE_SLURM=up, or SONDE_SLURM_DOWN="why" when it could not
#   slurm_down                           stops the three daemons by the PIDs slurm_up recorded
#
# Needs root (apt-get, daemons). Everything it writes lives under $SONDE_SLURM_DIR (a fresh temporary
# folder) except the Debian packages and /etc/munge/munge.key, which munged only reads from there.
# Every step that fails says why on stderr and leaves SONDE_SLURM_DOWN set, so the test reports skipped
# with that reason instead of passing silently.

slurm_fail() {
  echo "ci: slurm: $*" >&2
  export SONDE_SLURM_DOWN="$*"
  unset SONDE_SLURM
  return 1
}

slurm_up() {
  unset SONDE_SLURM SONDE_SLURM_DOWN
  if [ "$(id -u)" != 0 ]; then slurm_fail "not root: cannot install or start the Slurm daemons"; return 1; fi
  if ! command -v slurmctld >/dev/null 2>&1 || ! command -v slurmd >/dev/null 2>&1 || ! command -v sbatch >/dev/null 2>&1 || ! command -v munged >/dev/null 2>&1; then
    (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurmctld slurmd slurm-client munge >/dev/null) \
      || { slurm_fail "apt-get install slurmctld slurmd slurm-client munge failed"; return 1; }
  fi
  SONDE_SLURM_DIR="$(mktemp -d /tmp/sonde-slurm.XXXXXX)"
  export SONDE_SLURM_DIR
  local d="$SONDE_SLURM_DIR"
  chmod 755 "$d"

  # munge: a key readable only by munge, munged started as user munge
  install -d -o munge -g munge -m 0700 /etc/munge
  if [ ! -s /etc/munge/munge.key ]; then
    (mungekey --create --keyfile=/etc/munge/munge.key 2>/dev/null || dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none) \
      || { slurm_fail "could not generate /etc/munge/munge.key"; return 1; }
  fi
  chown munge:munge /etc/munge/munge.key && chmod 0400 /etc/munge/munge.key
  install -d -o munge -g munge -m 0755 "$d/munge"
  install -d -o munge -g munge -m 0700 "$d/munge-state" "$d/munge-log"
  runuser -u munge -- munged --socket="$d/munge/munge.socket.2" --pid-file="$d/munge/munged.pid" \
    --log-file="$d/munge-log/munged.log" --seed-file="$d/munge-state/munged.seed" --force \
    || { slurm_fail "munged did not start (see $d/munge-log/munged.log)"; return 1; }
  if ! munge --socket="$d/munge/munge.socket.2" -n </dev/null | unmunge --socket="$d/munge/munge.socket.2" >/dev/null 2>&1; then
    slurm_fail "munge round trip failed (see $d/munge-log/munged.log)"; return 1
  fi

  # slurm.conf: this machine as the one node, with the CPUs and memory slurmd itself detects
  local node cpus memory
  node="$(hostname -s)"
  cpus="$(slurmd -C 2>/dev/null | sed -n 's/.*CPUs=\([0-9]*\).*/\1/p' | head -1)"
  memory="$(slurmd -C 2>/dev/null | sed -n 's/.*RealMemory=\([0-9]*\).*/\1/p' | head -1)"
  [ -n "$cpus" ] || cpus="$(nproc)"
  [ -n "$memory" ] || memory=$(( $(awk '/MemTotal/ {print $2}' /proc/meminfo) / 1024 ))
  mkdir -p "$d/state" "$d/spool" "$d/log"
  cat >"$d/slurm.conf" <<EOF
ClusterName=sonde-ci
SlurmctldHost=$node(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$d/munge/munge.socket.2
CredType=cred/munge
StateSaveLocation=$d/state
SlurmdSpoolDir=$d/spool
SlurmctldPidFile=$d/slurmctld.pid
SlurmdPidFile=$d/slurmd.pid
SlurmctldLogFile=$d/log/slurmctld.log
SlurmdLogFile=$d/log/slurmd.log
SlurmctldPort=6817
SlurmdPort=6818
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
MpiDefault=none
ReturnToService=2
SchedulerParameters=sched_interval=1
MinJobAge=300
NodeName=$node NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$memory State=UNKNOWN
PartitionName=ci Nodes=$node Default=YES MaxTime=INFINITE State=UP
EOF
  export SLURM_CONF="$d/slurm.conf"
  slurmctld -f "$SLURM_CONF" -i || { slurm_fail "slurmctld did not start (see $d/log/slurmctld.log)"; return 1; }
  slurmd -f "$SLURM_CONF" -N "$node" || { slurm_fail "slurmd did not start (see $d/log/slurmd.log)"; return 1; }

  # ready when the node is idle (at most 60 s)
  local state="" i
  for i in $(seq 1 60); do
    state="$(sinfo -h -N -n "$node" -o %T 2>/dev/null | head -1)"
    [ "$state" = idle ] && break
    sleep 1
  done
  if [ "$state" != idle ]; then
    slurm_fail "node $node is not idle after 60 s (state: ${state:-no answer}; see $d/log/)"; return 1
  fi
  export SONDE_SLURM=up
  echo "ci: slurm: node $node idle ($cpus CPUs, $memory MB), SLURM_CONF=$SLURM_CONF"
}

slurm_down() {
  local d="${SONDE_SLURM_DIR:-}" pidfile pid
  [ -n "$d" ] || return 0
  for pidfile in "$d/slurmd.pid" "$d/slurmctld.pid" "$d/munge/munged.pid"; do
    [ -s "$pidfile" ] || continue
    pid="$(cat "$pidfile")"
    kill "$pid" 2>/dev/null || continue
    for _ in $(seq 1 20); do kill -0 "$pid" 2>/dev/null || break; sleep 0.5; done
  done
}
