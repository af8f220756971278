#!/bin/sh
# Estimated against measured work, one plan per row (benches/README.md, "Work estimate").
# Usage: benches/workload.sh [PLAN...]   (default: the demo, benchmark and calibration plans)
# Needs a release build and GNU time. CPU time is user + system of the whole run.
set -e
cd "$(dirname "$0")/.."
bin=target/release/linbudget
out=$(mktemp -d)
plans=${*:-"specs/*.yaml benches/*.yaml benches/workload/*.yaml"}
echo "| plan | estimated wall | estimated CPU | measured wall | measured CPU | estimate / measured, wall | estimate / measured, CPU |"
echo "|---|---:|---:|---:|---:|---:|---:|"
for plan in $plans; do
    estimate=$($bin check --max-work 1e9 "$plan" 2>&1 | sed -n 's/.*estimated run time \(.*\) (\(.*\) of one core)/\1|\2/p')
    /usr/bin/time -f "%e %U %S" -o "$out/time" $bin run --max-work 1e9 --quiet "$plan" --out "$out" >/dev/null 2>&1 || true
    set -- $(cat "$out/time" | tail -1)
    wall=$1; cpu=$(echo "$2 + $3" | bc -l)
    est_cpu=$(echo "$estimate" | cut -d'|' -f2)
    est_wall=$(echo "$estimate" | cut -d'|' -f1)
    seconds() { echo "$1" | awk '{v=$1; u=$2; if (u=="ms") v/=1000; else if (u=="min") v*=60; else if (u=="h") v*=3600; print v}'; }
    ratio_cpu=$(echo "$(seconds "$est_cpu") / ($cpu + 0.001)" | bc -l)
    ratio_wall=$(echo "$(seconds "$est_wall") / ($wall + 0.001)" | bc -l)
    printf "| %s | %s | %s | %.2f s | %.2f s | %.2f | %.2f |\n" "$(basename "$plan")" "$est_wall" "$est_cpu" "$wall" "$cpu" "$ratio_wall" "$ratio_cpu"
done
rm -rf "$out"
