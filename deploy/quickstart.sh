#!/usr/bin/env bash
# The demo: installs what is missing, builds, starts bellwetherd on 127.0.0.1 (gRPC and
# the status page, free ports) with a fresh state directory under build/, and streams the
# simulated Alder Point campus (buildings and delivery robots), printing live answers
# beside their verified error. Extra arguments go to `bellwether demo` (e.g. --rate 300,
# --steps 20000). Ctrl-C stops everything.
set -euo pipefail
root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
"$root/deploy/install-deps.sh"
"$root/deploy/build.sh"
build=${BELLWETHER_BUILD_DIR:-$root/build}
state="$build/quickstart-state"
# The demo recreates its pools on every run, so its state directory starts empty too (one
# left by an older build may be in another format, which bellwetherd refuses to load).
rm -rf "$state"
mkdir -p "$state"
addr_file=$(mktemp)

"$build/server/bellwetherd" --listen 127.0.0.1:0 --http 127.0.0.1:0 --state-dir "$state" \
  >"$addr_file" &
daemon=$!
demo=
cleanup() {
  if [ -n "$demo" ]; then
    kill -TERM "$demo" 2>/dev/null || true
    wait "$demo" 2>/dev/null || true
  fi
  kill -TERM "$daemon" 2>/dev/null || true
  wait "$daemon" 2>/dev/null || true
  rm -f "$addr_file"
}
trap cleanup EXIT
trap 'exit 0' INT TERM

# Both addresses are printed as soon as the ports are bound.
for _ in $(seq 100); do
  grep -q '^http on ' "$addr_file" && break
  kill -0 "$daemon" 2>/dev/null || { echo "quickstart: bellwetherd failed to start" >&2; exit 1; }
  sleep 0.1
done
addr=$(sed -n 's/^listening on //p' "$addr_file")
http=$(sed -n 's/^http on //p' "$addr_file")
[ -n "$addr" ] && [ -n "$http" ] ||
  { echo "quickstart: bellwetherd did not report its addresses" >&2; exit 1; }
echo "quickstart: bellwetherd on $addr (state in $state); Ctrl-C to stop"
echo "status page: http://$http/"
# `ready` follows once the state directory is loaded.
until grep -q '^ready$' "$addr_file"; do
  kill -0 "$daemon" 2>/dev/null || { echo "quickstart: bellwetherd stopped while loading its state" >&2; exit 1; }
  sleep 0.1
done
# In the background so that a TERM (e.g. from `timeout`) reaches the trap at once.
"$build/client/bellwether" --server "$addr" demo --status-url "http://$http/" "$@" &
demo=$!
wait "$demo" || true
