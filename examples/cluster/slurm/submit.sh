#!/bin/bash
# Submits a comparison to Slurm: an array job with one shard per task, then a merge job that
# starts when every task has ended. Settings come from the environment (defaults below).
# Prints one line: the two job ids and the report folder.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
export RELUME="${RELUME:-relume}"
export DATA="${DATA:-$(cd "$here/../../data" && pwd)/cold_store.csv}"
export TARGET="${TARGET:-power_kw}"
export ACTIVATIONS="${ACTIVATIONS:-relu,leaky-relu,elu,selu,gelu,tanh}"
export SEEDS="${SEEDS:-5}" FOLDS="${FOLDS:-5}" LAYERS="${LAYERS:-}" EPOCHS="${EPOCHS:-}"
SHARDS="${SHARDS:-10}"
export SWEEP_DIR="${SWEEP_DIR:-$PWD/sweep-$(date +%Y%m%d-%H%M%S)}"
mkdir -p "$SWEEP_DIR"
# --parsable prints "id" or "id;cluster".
array=$(sbatch --parsable --array="1-$SHARDS" --output="$SWEEP_DIR/slurm-%A_%a.out" \
    "$here/sweep.sbatch")
array=${array%%;*}
merge=$(sbatch --parsable --dependency="afterany:$array" \
    --output="$SWEEP_DIR/slurm-%j-merge.out" "$here/merge.sbatch")
merge=${merge%%;*}
echo "submitted: array job $array ($SHARDS tasks), merge job $merge; reports in $SWEEP_DIR"
