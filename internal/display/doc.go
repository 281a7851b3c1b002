// Package display holds what a display tick can show and how a missing tick
// is decided: the frame State (one spelling for every table, metric and
// message) and the Policy (cutoff and age cap). It has no dependencies, so
// the predictor, the recording format, the console and the display clock
// (stopgap/stream/cadence, type Clock) share one type.
package display
