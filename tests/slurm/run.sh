#!/usr/bin/env bash
# The README's job-array example, run for real on a one-node Slurm cluster on localhost:
# installs Debian's Slurm and MUNGE when missing, starts a fresh cluster in a scratch folder,
# submits examples/compute-array.sbatch (4 tasks, --shard K/4) and a dependent job that
# joins the parts, and checks with netCDF-C's ncdump that the joined file holds exactly what
# one run writes. The cluster is shut down and the scratch folder removed whatever happens.
#
#   tests/slurm/run.sh [SHEARBOX_BINARY] [FIXTURE_GENERATOR]
set -euo pipefail
root="$(cd "$(dirname "$0")/../.." && pwd)"
. "$root/scripts/lib.sh"
bin="$(realpath "${1:-$root/target/release/shearbox}")"
gen="$(realpath "${2:-$root/target/release/shearbox-fixtures}")"

need=()
for c in slurmctld slurmd sbatch munged; do command -v "$c" >/dev/null 2>&1 || need+=("$c"); done
if [ ${#need[@]} -gt 0 ]; then
    echo "shearbox: installing Slurm and MUNGE for the job-array test" >&2
    apt_install slurmctld slurmd slurm-client munge
fi

scratch="$(mktemp -d /tmp/shearbox-slurm.XXXXXX)"
chmod 755 "$scratch"
started_munge=""
ctld_pid=""
slurmd_pid=""
cleanup() {
    set +e
    if [ -n "$ctld_pid" ]; then
        SLURM_CONF="$scratch/slurm.conf" scontrol shutdown >/dev/null 2>&1
        for _ in $(seq 50); do
            kill -0 "$ctld_pid" 2>/dev/null || kill -0 "$slurmd_pid" 2>/dev/null || break
            sleep 0.1
        done
        kill "$ctld_pid" "$slurmd_pid" 2>/dev/null
    fi
    [ -n "$started_munge" ] && kill "$started_munge" 2>/dev/null
    rm -rf "$scratch"
}
trap cleanup EXIT INT TERM

# MUNGE, the authentication Slurm needs.
if ! munge -n 2>/dev/null | unmunge >/dev/null 2>&1; then
    [ -f /etc/munge/munge.key ] || as_root mungekey --create
    as_root mkdir -p /run/munge && as_root chown munge:munge /run/munge
    as_root runuser -u munge -- /usr/sbin/munged
    for _ in $(seq 50); do [ -s /run/munge/munged.pid ] && break; sleep 0.1; done
    started_munge="$(cat /run/munge/munged.pid)"
    munge -n | unmunge >/dev/null
fi

host="$(hostname -s)"
mkdir -p "$scratch/state" "$scratch/spool" "$scratch/work"
cat >"$scratch/slurm.conf" <<CONF
ClusterName=shearbox-test
SlurmctldHost=$host(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
StateSaveLocation=$scratch/state
SlurmdSpoolDir=$scratch/spool
SlurmctldPidFile=$scratch/slurmctld.pid
SlurmdPidFile=$scratch/slurmd.pid
SlurmctldLogFile=$scratch/slurmctld.log
SlurmdLogFile=$scratch/slurmd.log
SlurmctldPort=16817
SlurmdPort=16818
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
MpiDefault=none
ReturnToService=2
MinJobAge=300
MailProg=/bin/true
NodeName=$host NodeAddr=127.0.0.1 CPUs=2 Sockets=1 CoresPerSocket=2 ThreadsPerCore=1 State=UNKNOWN
PartitionName=main Nodes=$host Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$scratch/slurm.conf"
slurmctld -f "$SLURM_CONF" -i
slurmd -f "$SLURM_CONF" -N "$host"
for _ in $(seq 100); do [ -s "$scratch/slurmctld.pid" ] && [ -s "$scratch/slurmd.pid" ] && break; sleep 0.1; done
ctld_pid="$(cat "$scratch/slurmctld.pid")"
slurmd_pid="$(cat "$scratch/slurmd.pid")"
for _ in $(seq 300); do
    [ "$(sinfo -h -o %T 2>/dev/null)" = "idle" ] && break
    sleep 0.1
done
[ "$(sinfo -h -o %T)" = "idle" ] || { echo "the Slurm node did not come up" >&2; tail -20 "$scratch"/*.log >&2; exit 1; }

# The README shows the example as it is: every line of it but its comments.
while IFS= read -r line; do
    case "$line" in "#!"* | "# "* | "#" | "") continue ;; esac
    grep -Fxq -- "$line" "$root/README.md" || { echo "README.md lacks the example's line: $line" >&2; exit 1; }
done <"$root/examples/compute-array.sbatch"

# Inputs: 12 six-hourly steps in 3 files.
cd "$scratch/work"
"$gen" series data 12 3 1.0 >/dev/null
export SHEARBOX="$bin" INPUTS="data/kestrel_series_*.nc" PARTS="parts"

# The README's example: the array, then the join once every task has succeeded.
array="$(sbatch --parsable "$root/examples/compute-array.sbatch")"
join="$(sbatch --parsable --dependency="afterok:$array" --output=join.log \
    --wrap "\"$bin\" join 'parts/part_*.nc' -o diagnostics.nc")"
# squeue answers at once; sbatch --wait polls at growing intervals.
for _ in $(seq 1200); do
    [ -z "$(squeue -h -j "$array,$join" 2>/dev/null)" ] && break
    sleep 0.2
done
if ! scontrol show job "$join" | grep -q "JobState=COMPLETED"; then
    echo "the join job did not complete:" >&2
    scontrol show job "$join" >&2 || true
    cat ./*.log >&2
    exit 1
fi
for k in 1 2 3 4; do
    grep -q "shard $k/4" "shearbox-${array}_$k.log" || { echo "task $k did not run its shard" >&2; cat ./*.log >&2; exit 1; }
done

# One run over everything, and the joined file: equal to the last digit, as netCDF-C reads them.
"$bin" compute "data/kestrel_series_*.nc" --layers 1000-500,850-300 -o single.nc -q
ncdump diagnostics.nc | grep -v ':history = ' | sed 1d >joined.cdl
ncdump single.nc | grep -v ':history = ' | sed 1d >single.cdl
if ! cmp -s joined.cdl single.cdl; then
    diff joined.cdl single.cdl | head -20 >&2
    echo "the joined job-array output differs from a single run" >&2
    exit 1
fi
echo "slurm: a 4-task job array (--shard K/4) joined equals one run ($(grep -c . single.cdl) lines of ncdump compared)"
