#!/usr/bin/env bash
# The demo: installs what is missing, builds, starts bellwetherd on 127.0.0.1 with a
# state directory under build/, and streams the simulated Alder Point campus, printing
# live predictions and their verified error. Ctrl-C stops everything.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
"$root/deploy/install-deps.sh"
"$root/deploy/build.sh"
build=${BELLWETHER_BUILD_DIR:-$root/build}
state="$build/quickstart-state"
mkdir -p "$state"
addr_file=$(mktemp)

"$build/server/bellwetherd" --listen 127.0.0.1:0 --state-dir "$state" >"$addr_file" &
daemon=$!
cleanup() {
  kill -TERM "$daemon" 2>/dev/null || true
  wait "$daemon" 2>/dev/null || true
  rm -f "$addr_file"
}
trap cleanup EXIT
trap 'exit 0' INT TERM

for _ in $(seq 100); do
  grep -q '^listening on ' "$addr_file" && break
  kill -0 "$daemon" 2>/dev/null || { echo "quickstart: bellwetherd failed to start" >&2; exit 1; }
  sleep 0.1
done
addr=$(sed -n 's/^listening on //p' "$addr_file")
[ -n "$addr" ] || { echo "quickstart: bellwetherd did not report its address" >&2; exit 1; }
echo "quickstart: bellwetherd on $addr (state in $state); Ctrl-C to stop"
"$build/client/bellwether" --server "$addr" demo "$@" || true
