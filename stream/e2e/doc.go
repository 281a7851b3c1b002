// Package e2e holds the end-to-end tests of the live path: the relay
// (stopgap/stream/relay) fed by the simulated vehicle
// (stopgap/stream/simvehicle) over loopback WebRTC through an emulated
// lossy link, watched by a real headless Chromium on the operator console
// (stopgap/stream/console/consoletest) or by a Go viewer, and the loopback
// benchmark. Everything stays on 127.0.0.1.
//
// Screenshots go to $STOPGAP_ARTIFACTS (default <tmp>/stopgap-artifacts).
package e2e
