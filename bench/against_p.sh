#!/usr/bin/env bash
# Times barygrid's default barycenter on 8 fields of SIZE x SIZE against P,
# the engine issue's yardstick: the numpy peer's plain barycenter at epsilon
# 16, tol 1e-6, on 8 fields of 128 x 128. Both run as whole processes,
# alternating, and each barygrid run is compared with the mean of the peer
# runs on either side of it: on a shared machine the load changes from one
# minute to the next, and only neighbouring runs see the same one.
# Usage: bench/against_p.sh [SIZE] [ROUNDS]   (needs ../shared and Debian's numpy)
size=${1:-256}
rounds=${2:-3}
source "$(dirname "$0")/lib.sh"
/usr/bin/python3 ../shared/bench/make_fields.py --k 8 --size 128 --seed 2 --dir "$tmp/p" >/dev/null
/usr/bin/python3 ../shared/bench/make_fields.py --k 8 --size "$size" --seed 2 --dir "$tmp/f" >/dev/null
before=$(peer_p "$tmp/p")
for round in $(seq "$rounds"); do
  B=$(t "$tmp/barygrid" barycenter --tol 1e-6 --force --out "$tmp/ours.npy" --report "$tmp/r.json" "$tmp"/f/field_*.npy)
  after=$(peer_p "$tmp/p")
  echo "round $round: barygrid default ${size}x${size} $B s; P before $before s, after $after s; ratio $(echo "scale=3; 2 * $B / ($before + $after)" | bc) P"
  before=$after
done
/usr/bin/python3 - "$tmp/r.json" <<'PY'
import json, sys
r = json.load(open(sys.argv[1]))
print("iterations", r["iterations"], "finest level", r["finest_level_iterations"], "status", r["status"], "residual", r["residual"])
PY
