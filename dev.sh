#!/usr/bin/env bash
# dev.sh: the project's two entry points on a fresh Debian 12 machine.
#   ./dev.sh demo [args]   install what is missing, build, run the demo (stopgap demo)
#   ./dev.sh test          install what is missing, build, vet and run the whole test suite
#   ./dev.sh deps          only install what is missing
# Every step says what it does; a failed step stops the script with its exit code.
set -euo pipefail
cd "$(dirname "$0")"

# Debian packages the build and the tests need:
#   libopencv-dev  OpenCV 4.6 for gocv v0.31.0 (warping, drawing, image I/O)
#   libvpx-dev     VP8 encoder and decoder for the live relay
#   pkg-config     how cgo finds both
#   opencv-doc     reference images and the ground-truth homography used by the tests
#   chromium       the real browser the console tests drive headless
#   iproute2, iptables  the browser-as-vehicle test: its own network namespace and packet loss
#   python3-skimage is NOT needed: its reference figures are committed under bench/testdata.
APT_PACKAGES=(libopencv-dev libvpx-dev pkg-config opencv-doc chromium gcc g++ iproute2 iptables)

# Packages whose code runs goroutines, tested again under the race detector by
# `./dev.sh test`. -short skips their real-time loopback runs, which the plain
# run above covers and which the detector slows past their timing; the
# filter's only concurrent test is TestConcurrentUse.
RACE_PACKAGES=(./stream/console ./stream/recording ./stream/relay ./stream/rtpudp ./stream/simvehicle ./stream/vp8 ./stream/whip)

race() {
  echo "dev.sh: go test -race -short (packages with concurrency: ${RACE_PACKAGES[*]}; filter's concurrency test)" >&2
  go test -race -short -count=1 -timeout 30m "${RACE_PACKAGES[@]}"
  go test -race -count=1 -run '^TestConcurrentUse$' ./filter
}

need_install() {
  local missing=()
  for p in "${APT_PACKAGES[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
  done
  echo "${missing[@]:-}"
}

deps() {
  local missing
  missing=$(need_install)
  if [ -n "$missing" ]; then
    echo "dev.sh: installing Debian packages: $missing" >&2
    local sudo=""
    [ "$(id -u)" -eq 0 ] || sudo="sudo"
    $sudo apt-get update -q
    DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -q --no-install-recommends $missing
  fi
  if ! command -v go >/dev/null 2>&1; then
    if [ -x /usr/local/go/bin/go ]; then export PATH="/usr/local/go/bin:$PATH"; else
      echo "dev.sh: Go is not installed; install Go 1.26 (see README) and run again" >&2; exit 1; fi
  fi
  go mod download
}

case "${1:-}" in
  deps) deps ;;
  demo)
    shift; deps
    echo "dev.sh: building stopgap" >&2
    go build -o bin/stopgap ./cmd/stopgap
    exec ./bin/stopgap demo "$@"
    ;;
  test)
    deps
    echo "dev.sh: go vet ./..." >&2
    go vet ./...
    echo "dev.sh: go test ./... (short fuzz seeds included; long fuzzing is separate, see DEVELOPERS.md)" >&2
    # Packages whose tests run live sessions in real time (loopback WebRTC,
    # a real browser) run after the rest, one package at a time, so that
    # CPU-heavy replay tests do not starve their display clocks.
    local_realtime='^stopgap/stream/(e2e|relay|console|simvehicle|whip|rtpudp)(/|$)'
    go test -count=1 -timeout 30m $(go list ./... | grep -v -E "$local_realtime")
    echo "dev.sh: go test -p 1 (real-time packages, one at a time)" >&2
    go test -p 1 -count=1 -timeout 30m $(go list ./... | grep -E "$local_realtime")
    race
    ;;
  *)
    echo "usage: ./dev.sh demo [stopgap demo flags] | ./dev.sh test | ./dev.sh deps" >&2
    exit 2
    ;;
esac
