#!/usr/bin/env bash
# container-smoke.sh: build the stopgap image and smoke-test it, when a
# container tool with a working engine is present; otherwise say so and skip
# (exit 0). Run from anywhere; the build context is the repository root.
#
#   internal/deploy/container-smoke.sh            # docker, else podman
#   CONTAINER_TOOL=podman internal/deploy/container-smoke.sh
#
# The smoke test runs the image as it runs in production: non-root, read-only
# root file system, no capabilities, a tmpfs for its output. It renders a
# tiny simulated drive and replays it (the whole offline engine: filter,
# predictor, OpenCV, report writer), which fails if a runtime library is
# missing from the image.
set -euo pipefail
root="$(cd "$(dirname "$0")/../.." && pwd)"
tag="${STOPGAP_IMAGE:-stopgap:smoke}"

tool="${CONTAINER_TOOL:-}"
if [ -z "$tool" ]; then
  for t in docker podman; do
    if command -v "$t" >/dev/null 2>&1; then tool="$t"; break; fi
  done
fi
if [ -z "$tool" ]; then
  echo "container-smoke: SKIPPED: no container tool (docker or podman) found" >&2
  exit 0
fi
if ! "$tool" info >/dev/null 2>&1; then
  echo "container-smoke: SKIPPED: $tool is installed but its engine is not reachable ($tool info failed)" >&2
  exit 0
fi

echo "container-smoke: building $tag with $tool" >&2
"$tool" build -f "$root/internal/deploy/Dockerfile" -t "$tag" "$root"

run() {
  "$tool" run --rm --read-only --user 65532:65532 --cap-drop ALL \
    --security-opt no-new-privileges --tmpfs /work:rw,size=256m "$tag" "$@"
}
echo "container-smoke: stopgap help" >&2
run help >/dev/null
echo "container-smoke: simdrive + replay inside the container" >&2
"$tool" run --rm --read-only --user 65532:65532 --cap-drop ALL --security-opt no-new-privileges \
  --tmpfs /work:rw,size=256m --entrypoint /bin/sh "$tag" -c '
    set -e
    stopgap simdrive --out /work/drive --width 160 --height 90 --duration-s 2 --quiet
    stopgap replay --drive /work/drive --out /work/report --frame-loss-rate 0.2 --quiet
    test -s /work/report/summary.json'
echo "container-smoke: OK" >&2
