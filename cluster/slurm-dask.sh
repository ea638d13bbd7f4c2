#!/usr/bin/env bash
# Run one eigenfarm command against a dask cluster started inside this SLURM allocation.
# Usage: sbatch [SLURM options] cluster/slurm-dask.sh SUBCOMMAND ARGS...   (see cluster/README.md)
#SBATCH --job-name=eigenfarm
#SBATCH --time=02:00:00
set -euo pipefail

EIGENFARM_ENV=${EIGENFARM_ENV:-$PWD/.venv}
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 MKL_NUM_THREADS=1
scheduler_file=${SLURM_SUBMIT_DIR:-$PWD}/.eigenfarm-scheduler-${SLURM_JOB_ID:-local}.json

"$EIGENFARM_ENV/bin/dask" scheduler --scheduler-file "$scheduler_file" &
scheduler_pid=$!
for _ in $(seq 60); do [ -s "$scheduler_file" ] && break; sleep 1; done
[ -s "$scheduler_file" ] || { echo "dask scheduler did not start" >&2; exit 1; }

srun --ntasks="${SLURM_NTASKS:-1}" "$EIGENFARM_ENV/bin/dask" worker --scheduler-file "$scheduler_file" \
    --nthreads 1 --memory-limit "${EIGENFARM_WORKER_MEMORY:-auto}" &
workers_pid=$!

address=$("$EIGENFARM_ENV/bin/python" -c "import json,sys; print(json.load(open(sys.argv[1]))['address'])" "$scheduler_file")
status=0
"$EIGENFARM_ENV/bin/eigenfarm" "$@" --scheduler "$address" || status=$?
kill "$workers_pid" "$scheduler_pid" 2>/dev/null || true
rm -f "$scheduler_file"
exit "$status"
