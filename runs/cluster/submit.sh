#!/bin/bash
# Queue a dosemill run as N shards (a Slurm array job) plus a merge job that starts when every
# shard succeeded.
#
#   runs/cluster/submit.sh DECK N OUTDIR [extra sbatch options...]
#
# Prints the two job ids. The merged result is OUTDIR/<output name of the deck>. Decks with a
# [sweep] are not supported here (queue one deck per combination).
set -euo pipefail
if [ $# -lt 3 ]; then
    echo "usage: $0 DECK N OUTDIR [sbatch options...]" >&2
    exit 2
fi
DECK="$(realpath "$1")"; N="$2"; OUTDIR="$(realpath -m "$3")"; shift 3
HERE="$(cd "$(dirname "$0")" && pwd)"
BIN="${DOSEMILL:-dosemill}"
case "$N" in ''|*[!0-9]*) echo "N must be a whole number ≥ 1, not '$N'" >&2; exit 2 ;; esac
[ "$N" -ge 1 ] || { echo "N must be ≥ 1" >&2; exit 2; }
# The deck's output file name, from its resolved form.
OUTPUT="$("$BIN" check "$DECK" | sed -n 's/^output = "\(.*\)"$/\1/p' | head -n 1)"
[ -n "$OUTPUT" ] || { echo "cannot read run.output of $DECK (does \`$BIN check $DECK\` pass?)" >&2; exit 2; }
NAME="$(basename "$OUTPUT")"; STEM="${NAME%.h5}"
mkdir -p "$OUTDIR"
export DECK OUTDIR DOSEMILL="$BIN"
array_id="$(sbatch --parsable --array="0-$((N - 1))" --chdir="$OUTDIR" --export=ALL "$@" "$HERE/shard-array.sbatch")"
array_id="${array_id%%;*}"
merge_id="$(STEM="$STEM" SHARDS="$N" RESULT="$OUTDIR/$NAME" sbatch --parsable --dependency="afterok:$array_id" \
    --chdir="$OUTDIR" --export=ALL "$@" "$HERE/merge.sbatch")"
merge_id="${merge_id%%;*}"
echo "array job $array_id ($N shards), merge job $merge_id -> $OUTDIR/$NAME"
