#!/usr/bin/env bash
# A fleet trained by a Slurm job array: 8 tasks, each trains the shard of
# its array index into its own folder; submitting this script also
# submits the merge, to run once every task has succeeded.
#
#   sbatch examples/fleet-jobs/slurm-array.sh
#
# DATA and WORK must be on a file system every node sees. A task that
# fails can be run again alone (sbatch --array=3 ...): it writes the same
# files, and the merge checks every model file against its shard's record.
#SBATCH --job-name=quern-fleet
#SBATCH --array=0-7
#SBATCH --cpus-per-task=2
#SBATCH --mem=2G
#SBATCH --time=02:00:00
set -euo pipefail
DATA="${DATA:-$HOME/stations.csv}"
WORK="${WORK:-$HOME/quern-fleet}"
if [ -z "${SLURM_ARRAY_TASK_ID:-}" ]; then
	echo "submit with sbatch: this script runs as one task of a job array" >&2
	exit 2
fi
export GOMAXPROCS="${SLURM_CPUS_PER_TASK:-2}"
if [ "$SLURM_ARRAY_TASK_ID" = "${SLURM_ARRAY_TASK_MIN:-0}" ]; then
	# the first task queues the merge behind the whole array
	sbatch --dependency="afterok:${SLURM_ARRAY_JOB_ID}" --job-name=quern-fleet-merge \
		--wrap "quern merge -out '$WORK/fleet' '$WORK'/shards/*"
fi
mkdir -p "$WORK/shards"
exec quern train -data "$DATA" -group station \
	-columns temp_c,door_openings,battery_v,heater_duty,signal_dbm \
	-seed 1 -quiet \
	-shard "${SLURM_ARRAY_TASK_ID}/${SLURM_ARRAY_TASK_COUNT}" \
	-out "$WORK/shards/${SLURM_ARRAY_TASK_ID}"
