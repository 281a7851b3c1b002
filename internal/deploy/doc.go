// Package deploy holds the files that run stopgap outside a developer's
// machine, and the tests that check them offline:
//
//   - Dockerfile: the container image on Debian 12, with the Debian packages
//     of ./dev.sh; container-smoke.sh builds and smoke-tests it when a
//     container engine is reachable, and skips with a message when not.
//   - k8s/relay.yaml: one relay per vehicle on Kubernetes (token Secret,
//     camera ConfigMap, Deployment with startup, readiness and liveness
//     probes on the relay's /readyz and /livez, Service).
//   - k8s/replay-job.yaml: replays of a drive list in shards as an Indexed
//     Job (each pod's shard from JOB_COMPLETION_INDEX); k8s/replay-merge-job.yaml
//     merges the shards into one report once the Job is complete.
//   - stopgap-relay.service: a sandboxed systemd unit for operator-side
//     machines that are not on a cluster.
//
// The package has no code beyond this comment; its test decodes the
// manifests strictly into the Kubernetes API types (k8s.io/api) and checks
// probes, resources and the security context, and verifies the unit with
// systemd-analyze when it is installed.
package deploy
