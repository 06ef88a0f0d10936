#!/usr/bin/env bash
# Times barygrid against the numpy peer as whole processes, alternating, and
# prints the ratio and the L1 agreement. Usage: bench/compare.sh [EPS] [ITERS]
set -euo pipefail
cd "$(dirname "$0")/.."
eps=${1:-16}
iters=${2:-}
tmp=$(mktemp -d)
/usr/bin/python3 ../shared/bench/make_fields.py --k 8 --size 128 --seed 2 --dir "$tmp/f" >/dev/null
go build -o "$tmp/barygrid" ./cmd/barygrid
peer_args=(--eps "$eps" --tol 1e-6)
ours_args=(--epsilon "$eps" --tol 1e-6 --debias=false --force)
if [ -n "$iters" ]; then
  peer_args=(--eps "$eps" --iters "$iters")
  # Same plain iteration as the peer, so that the time per iteration compares.
  ours_args=(--epsilon "$eps" --tol 1e-300 --max-iter "$iters" --relax 1 --debias=false --force)
fi
for round in 1 2; do
  t0=$(date +%s.%N)
  /usr/bin/python3 ../shared/bench/peer_barycenter.py "${peer_args[@]}" --out "$tmp/peer.npy" "$tmp"/f/field_*.npy >/dev/null
  t1=$(date +%s.%N)
  "$tmp/barygrid" barycenter "${ours_args[@]}" --out "$tmp/ours.npy" "$tmp"/f/field_*.npy >/dev/null || true
  t2=$(date +%s.%N)
  echo "round $round: peer $(echo "$t1 - $t0" | bc) s, barygrid $(echo "$t2 - $t1" | bc) s, ratio $(echo "scale=3; ($t2 - $t1) / ($t1 - $t0)" | bc)"
done
/usr/bin/python3 -c "import numpy as np; print('L1(peer, barygrid) =', np.abs(np.load('$tmp/peer.npy') - np.load('$tmp/ours.npy')).sum())"
rm -rf "$tmp"
