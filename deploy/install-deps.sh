#!/usr/bin/env bash
# Installs the Debian 12 packages Bellwether needs to build and test, only those missing.
# Idempotent: a second run installs nothing. Needs root (or sudo) when something is missing.
set -euo pipefail

packages=(
  g++ cmake ninja-build pkg-config
  libgrpc++-dev protobuf-compiler-grpc libprotobuf-dev protobuf-compiler
  libeigen3-dev libabsl-dev prometheus-cpp-dev
  libgtest-dev libgmock-dev libbenchmark-dev
  tzdata python3-numpy
  libcivetweb-dev chromium prometheus python3-grpcio python3-grpc-tools
  libssl-dev openssl
  clang-14 libclang-rt-14-dev
)

missing=()
for p in "${packages[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done

if [ ${#missing[@]} -eq 0 ]; then
  echo "install-deps: all ${#packages[@]} packages present"
  exit 0
fi

echo "install-deps: installing ${missing[*]}"
sudo_cmd=()
if [ "$(id -u)" -ne 0 ]; then sudo_cmd=(sudo); fi
export DEBIAN_FRONTEND=noninteractive
"${sudo_cmd[@]}" apt-get update -qq
"${sudo_cmd[@]}" apt-get install -y -qq --no-install-recommends "${missing[@]}"
