#!/usr/bin/env bash
# A fleet trained by a Slurm job array: 8 tasks, each trains the shard of
# its array index into its own folder; the merge runs once every task has
# succeeded:
#
#   jid=$(sbatch --parsable examples/fleet-jobs/slurm-array.sh)
#   sbatch --dependency=afterok:$jid --job-name=quern-fleet-merge \
#          --wrap "quern merge -out \$HOME/quern-fleet/fleet \$HOME/quern-fleet/shards/*"
#
# DATA and WORK must be on a file system every node sees. A task that
# failed can be run again alone (sbatch --array=3 examples/fleet-jobs/slurm-array.sh):
# it writes the same files, and the merge checks every model file against
# its shard's record of it. SHARDS must stay the array's size (--array=0-7).
#SBATCH --job-name=quern-fleet
#SBATCH --array=0-7
#SBATCH --cpus-per-task=2
#SBATCH --mem=2G
#SBATCH --time=02:00:00
set -euo pipefail
SHARDS=8
DATA="${DATA:-$HOME/stations.csv}"
WORK="${WORK:-$HOME/quern-fleet}"
if [ -z "${SLURM_ARRAY_TASK_ID:-}" ]; then
	echo "submit with sbatch: this script runs as one task of a job array" >&2
	exit 2
fi
export GOMAXPROCS="${SLURM_CPUS_PER_TASK:-2}"
mkdir -p "$WORK/shards"
exec quern train -data "$DATA" -group station \
	-columns temp_c,door_openings,battery_v,heater_duty,signal_dbm \
	-seed 1 -quiet \
	-shard "${SLURM_ARRAY_TASK_ID}/${SHARDS}" \
	-out "$WORK/shards/${SLURM_ARRAY_TASK_ID}"
