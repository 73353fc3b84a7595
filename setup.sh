#!/usr/bin/env bash
# trapwork's one set-up script, for Debian 12 (as root, or with sudo):
#   ./setup.sh demo               install what is needed, build, run the built-in default scenario
#   ./setup.sh test               install, build, run every test (unit and validation)
#   ./setup.sh build              install and build only
#   ./setup.sh sanitize           also install clang; the sanitizer and fuzz stage of CI
#                                 (.ci/sanitize: ASan+UBSan build of every test, short fuzz runs)
# The build goes to ./build; the tool is ./build/trapwork.
set -euo pipefail
cd "$(dirname "$0")"

packages=(cmake make g++ pkg-config libeigen3-dev libspectra-dev libfftw3-dev libboost-dev
          libcli11-dev catch2 libtomlplusplus-dev libmuparser-dev nlohmann-json3-dev libnlopt-cxx-dev
          libplplot-dev plplot-driver-cairo
          pybind11-dev python3-dev python3-numpy python3-pytest python3-matplotlib
          libopenmpi-dev openmpi-bin)
# clang 14 and its runtimes (ASan, UBSan, libFuzzer) only for the sanitizer stage
[ "${1:-build}" = sanitize ] && packages+=(clang-14 libclang-rt-14-dev)
missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  sudo=""
  [ "$(id -u)" -eq 0 ] || sudo="sudo"
  echo "setup: installing ${missing[*]}" >&2
  $sudo apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq --no-install-recommends "${missing[@]}" >&2
fi

jobs=$(nproc 2>/dev/null || echo 2)
[ "${1:-build}" = sanitize ] && exec .ci/sanitize  # its own build folder, not ./build
cmake -S . -B build -DCMAKE_BUILD_TYPE=Release >/dev/null
cmake --build build -j "$jobs"

case "${1:-build}" in
  demo) shift; exec ./build/trapwork demo "$@" ;;
  test) exec ctest --test-dir build --output-on-failure -j "$jobs" ;;
  build) ;;
  *) echo "usage: ./setup.sh demo|test|build|sanitize" >&2; exit 2 ;;
esac
