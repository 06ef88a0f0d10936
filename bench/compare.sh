#!/usr/bin/env bash
# Times barygrid against the numpy peer as whole processes in the same run,
# alternating, and prints the ratios and the L1 agreement with the peer.
# P is the peer's plain barycenter at epsilon 16, tol 1e-6 (the yardstick of
# the engine issue); barygrid runs plain at epsilon 16 and at its default
# (epsilon one squared pixel), and the distance command between the first two
# fields at epsilon 4 (the engine issue's target: P/10).
# Usage: bench/compare.sh [SIZE] [ROUNDS]   (needs ../shared and Debian's numpy)
size=${1:-128}
rounds=${2:-1}
source "$(dirname "$0")/lib.sh"
/usr/bin/python3 ../shared/bench/make_fields.py --k 8 --size "$size" --seed 2 --dir "$tmp/f" >/dev/null
for round in $(seq "$rounds"); do
  P=$(peer_p "$tmp/f")
  A=$(t "$tmp/barygrid" barycenter --epsilon 16 --tol 1e-6 --force --out "$tmp/ours16.npy" --report "$tmp/r16.json" "$tmp"/f/field_*.npy)
  B=$(t "$tmp/barygrid" barycenter --tol 1e-6 --force --out "$tmp/ours1.npy" --report "$tmp/r1.json" "$tmp"/f/field_*.npy)
  D=$(t "$tmp/barygrid" distance --epsilon 4 "$tmp"/f/field_00.npy "$tmp"/f/field_01.npy)
  echo "round $round, ${size}x${size}: P (peer, eps 16) $P s; barygrid eps 16 $A s (P/$(echo "scale=1; $P / $A" | bc)); default eps 1 px^2 $B s (P/$(echo "scale=2; $P / $B" | bc)); distance eps 4 $D s (P/$(echo "scale=1; $P / $D" | bc))"
done
/usr/bin/python3 - "$tmp" <<'PY'
import json, sys, numpy as np
d = sys.argv[1]
print("L1(peer, barygrid) at eps 16:", np.abs(np.load(d + "/peer.npy") - np.load(d + "/ours16.npy")).sum())
for e in ("16", "1"):
    r = json.load(open(d + "/r" + e + ".json"))
    print("eps", e, ": iterations", r["iterations"], "finest level", r["finest_level_iterations"], "levels", r["levels"], "status", r["status"])
PY
