# Shared by the bench scripts (sourced, not run): a scratch folder removed on
# exit, barygrid built into it, and t, which runs a command and prints its
# wall time in seconds (output discarded; a failure still prints a time, and
# the scripts' own checks of the outputs catch it).
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
go build -o "$tmp/barygrid" ./cmd/barygrid
t() { local t0; t0=$(date +%s.%N); "$@" >/dev/null 2>&1 || true; echo "$(date +%s.%N) - $t0" | bc; }
# peer_p times the numpy peer's plain barycenter at epsilon 16, tol 1e-6 (P,
# the engine issue's yardstick, when its fields are 128 x 128) on the fields
# in folder $1.
peer_p() { t /usr/bin/python3 ../shared/bench/peer_barycenter.py --eps 16 --tol 1e-6 --out "$tmp/peer.npy" "$1"/field_*.npy; }
