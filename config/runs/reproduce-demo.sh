#!/usr/bin/env bash
# Reproduce the pinned demo run (config/runs/demo.yaml) and check it against the
# committed record (config/runs/demo/manifest.json and its tables).
#
#   bash config/runs/reproduce-demo.sh [RESULTS [SNAKEMAKE_ARGS...]]  # rerun and verify
#   bash config/runs/reproduce-demo.sh --update [RESULTS]  # pin again, rerun, refresh the record
#
# RESULTS defaults to results/demo-reproduce; further arguments go to snakemake
# (e.g. --cores 1). Exit status: 0 when every output and the
# manifest are identical to the record, 1 on a difference, 2 when the run itself fails
# (a pinned run refuses to start when the archive, settings or software differ).
set -euo pipefail
cd "$(dirname "$0")/../.."

BIN=${BIN:-.venv/bin}
PIN=config/runs/demo.yaml
RECORD=config/runs/demo
UPDATE=0
if [ "${1:-}" = "--update" ]; then UPDATE=1; shift; fi
RESULTS=${1:-results/demo-reproduce}
shift || true

# The demo archive is synthesized deterministically from its seed (~1 min).
if [ ! -f demo-archive/deployments.csv ]; then
    "$BIN/floeheat" synth demo-archive --size demo --seed 1
fi
if [ "$UPDATE" = 1 ]; then
    "$BIN/floeheat" pin demo-archive --config "$PIN" --name demo
fi

start=$(date +%s)
"$BIN/snakemake" --profile profiles/default --configfile "$PIN" \
    --config results="$RESULTS" "$@" || exit 2
echo "demo run: $(( $(date +%s) - start )) s"

if [ "$UPDATE" = 1 ]; then
    mkdir -p "$RECORD/tables"
    cp "$RESULTS/manifest.json" "$RECORD/manifest.json"
    for t in seasonal climatology failures; do
        cp "$RESULTS/tables/$t.csv" "$RECORD/tables/$t.csv"
    done
    echo "record refreshed in $RECORD/ (commit it with $PIN)"
fi

status=0
"$BIN/floeheat" verify "$RESULTS" --against "$RECORD/manifest.json" || status=$?
if [ "$status" -ge 2 ]; then exit "$status"; fi
if ! cmp -s "$RESULTS/manifest.json" "$RECORD/manifest.json"; then
    echo "manifest.json differs from $RECORD/manifest.json (config, software or inputs):"
    diff "$RECORD/manifest.json" "$RESULTS/manifest.json" | head -n 40 || true
    status=1
fi
exit "$status"
