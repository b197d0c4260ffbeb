# A throwaway single-node SLURM cluster for the tests (sourced by .ci/run; needs root).
# start_slurm installs slurm-wlm and munge from the distribution when missing, writes a minimal
# slurm.conf into a temporary folder (one node, linuxproc process tracking, no task plugin, no
# accounting, free loopback ports), starts munged, slurmctld and slurmd, and exports
# FEWSHOT_TEST_SLURM=1 and SLURM_CONF. stop_slurm stops them and removes the folder.
SLURM_DIR=""
free_port() { python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'; }
start_slurm() {
  if [ "$(id -u)" != 0 ]; then echo "not root: SLURM tests will skip"; return 1; fi
  if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
    echo "installing slurm-wlm and munge from the distribution's packages"
    (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge) >/tmp/fewshot-slurm-install.log 2>&1 \
      || { echo "SLURM could not be installed (see /tmp/fewshot-slurm-install.log): its tests will skip"; return 1; }
  fi
  SLURM_DIR=$(mktemp -d /tmp/fewshot-slurm.XXXXXX)
  mkdir -p "$SLURM_DIR/state" "$SLURM_DIR/spool" "$SLURM_DIR/munge"
  chmod 700 "$SLURM_DIR/munge"
  dd if=/dev/urandom of="$SLURM_DIR/munge/munge.key" bs=1024 count=1 status=none
  chmod 400 "$SLURM_DIR/munge/munge.key"
  local cpus host ctl_port d_port
  cpus=$(nproc); host=$(hostname -s); ctl_port=$(free_port); d_port=$(free_port)
  cat >"$SLURM_DIR/slurm.conf" <<CONF
ClusterName=fewshot-ci
SlurmctldHost=$host(127.0.0.1)
SlurmctldPort=$ctl_port
SlurmdPort=$d_port
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
StateSaveLocation=$SLURM_DIR/state
SlurmdSpoolDir=$SLURM_DIR/spool
SlurmctldPidFile=$SLURM_DIR/slurmctld.pid
SlurmdPidFile=$SLURM_DIR/slurmd.pid
SlurmctldLogFile=$SLURM_DIR/slurmctld.log
SlurmdLogFile=$SLURM_DIR/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SchedulerType=sched/builtin
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
MpiDefault=none
ReturnToService=2
MaxArraySize=1001
KillWait=10
NodeName=$host NodeAddr=127.0.0.1 CPUs=$cpus State=UNKNOWN
PartitionName=ci Nodes=$host Default=YES MaxTime=INFINITE State=UP OverSubscribe=FORCE:8
CONF
  export SLURM_CONF="$SLURM_DIR/slurm.conf"
  munged --key-file="$SLURM_DIR/munge/munge.key" --socket="$SLURM_DIR/munge/socket" \
    --pid-file="$SLURM_DIR/munge/munged.pid" --log-file="$SLURM_DIR/munge/munged.log" \
    --seed-file="$SLURM_DIR/munge/seed" --force || { echo "munged did not start: SLURM tests will skip"; return 1; }
  printf 'AuthInfo=socket=%s\n' "$SLURM_DIR/munge/socket" >>"$SLURM_DIR/slurm.conf"
  slurmctld || { echo "slurmctld did not start (see $SLURM_DIR/slurmctld.log): SLURM tests will skip"; return 1; }
  slurmd || { echo "slurmd did not start (see $SLURM_DIR/slurmd.log): SLURM tests will skip"; return 1; }
  local k
  for k in $(seq 1 60); do
    if sinfo -h -o %t 2>/dev/null | grep -qx idle; then
      export FEWSHOT_TEST_SLURM=1
      echo "SLURM $(sinfo -V | awk '{print $2}') with one node ($cpus CPUs) for the cluster tests"
      return 0
    fi
    sleep 1
  done
  echo "the SLURM node never became idle (see $SLURM_DIR/*.log): SLURM tests will skip"
  return 1
}
stop_slurm() {
  [ -n "$SLURM_DIR" ] || return 0
  local f pids="" p k
  for f in slurmd.pid slurmctld.pid munge/munged.pid; do
    [ -f "$SLURM_DIR/$f" ] && pids="$pids $(cat "$SLURM_DIR/$f")"
  done
  for p in $pids; do kill "$p" 2>/dev/null; done
  for k in $(seq 1 30); do  # wait until they are gone (at most 30 s) before removing their folder
    for p in $pids; do kill -0 "$p" 2>/dev/null && break; p=""; done
    [ -z "$p" ] && break
    sleep 1
  done
  rm -rf "$SLURM_DIR"
  SLURM_DIR=""
}
