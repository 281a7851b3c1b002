//go:build !linux || !cgo

package timerslack

// Current returns -1: the timer slack is a Linux setting.
func Current() int64 { return -1 }

func cDefault() int64 { return Default }
func cEnvVar() string { return EnvVar }

func setCurrent(int64) error { return nil }
