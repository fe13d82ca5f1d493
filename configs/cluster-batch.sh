#!/bin/bash
# Example batch script for running a qmc configuration on a cluster with MPI.
#
# Adapt the resource requests to your scheduler's syntax; the intent is:
#   walltime: e.g. 24 hours              (the run stops cleanly at the limit, see below)
#   ranks:    e.g. 64 MPI ranks, one per core; no threads per rank are needed
#   memory:   small (a few hundred MB per rank for lattices up to ~64x64)
#   signal:   ask the scheduler to send SIGTERM a few minutes before the hard limit, if it can
#
# How the run is spread: rank 0 hands out tasks (largest lattices first) and also computes; every other
# rank asks for the next task when it starts one.  A replica-exchange ladder ([exchange] along = ...) of M
# chains runs side by side on up to M ranks (blocks of chains that meet at every exchange point; at most
# [exchange] max_ranks).  More ranks than units of work gives idle ranks: use [sampling] copies or more scan
# points to have at least as many units as ranks.
#
# Time limit: on SIGTERM every rank writes a checkpoint of its running task and the job exits with status 75.
# Submitting the same script again resumes exactly where it stopped (unfinished tasks only; finished ones
# are never rerun), with bit-identical results.  `--max-time SECONDS` is an alternative when the scheduler
# sends no signal before killing the job: set it a few minutes below the walltime.
#
# Shared file systems (NFS, Lustre, GPFS, BeeGFS):
#   * Put the run directory on the shared (parallel) file system, not on node-local scratch: every rank
#     writes its own task files there, and rank 0 alone writes index.json and run.log.
#   * One file per task is rewritten atomically (write to a temporary file, fsync, rename) at most once per
#     second and normally every `checkpoint_seconds` (default 300) or when a bin completes: for thousands
#     of ranks raise `checkpoint_seconds` and choose bins of at least a minute, so that the file system
#     sees a handful of writes per second in total.
#   * Keep the number of task files per run directory moderate (tens of thousands at most); split very
#     large scans into several configurations / run directories.
#   * The Python environment itself is read by every rank at start-up; on large jobs install it on a fast
#     file system or in a container image, and keep numba's compiled-function cache writable and shared
#     (NUMBA_CACHE_DIR) so that it is compiled once, not once per rank.
#   * Never run two jobs on the same run directory at the same time.

set -euo pipefail

CONFIG=${CONFIG:-configs/jq2-exchange.toml}   # the run configuration
RANKS=${RANKS:-64}                             # total MPI ranks of the job

# Activate the Python environment that has the project installed.  Either with the 'mpi' extra (mpi4py +
# the mpich wheel, fine within one node), or -- usually better across nodes -- with mpi4py built against
# the cluster's own MPI (load its module, then: pip install --no-binary mpi4py mpi4py; do not install the
# mpich wheel then).  Use the mpiexec of the same MPI that mpi4py was built with.
# source /path/to/venv/bin/activate

export OMP_NUM_THREADS=1                      # one core per rank
export OPENBLAS_NUM_THREADS=1
# export NUMBA_CACHE_DIR=$PWD/.numba-cache     # shared, writable compile cache (see above)

# The run itself.  Exit status 0: all tasks done; 75: stopped cleanly by the time limit, unfinished
# (resubmit to go on); 1: some task failed (see run.log in the run directory; the other tasks ran);
# 2: bad input.
# It runs in the background so that a SIGTERM sent only to this script is passed on to mpiexec (which
# passes it to every rank); the scheduler's own launcher works the same way in place of mpiexec.
mpiexec -n "$RANKS" qmc run "$CONFIG" --quiet &
pid=$!
trap 'kill -TERM "$pid" 2>/dev/null || true' TERM INT
status=0
wait "$pid" || status=$?
while kill -0 "$pid" 2>/dev/null; do   # woken by the trap: wait for the checkpoints and the clean exit
    status=0
    wait "$pid" || status=$?
done
echo "qmc run finished with exit status $status"

# Afterwards (on a login node or here):
# qmc summary runs/jq2-exchange           # acceptance rates of the exchange ladders included
# qmc analyze runs/jq2-exchange --plot
exit "$status"
