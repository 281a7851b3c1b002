package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/internal/vocab"
)

// TestRunExitCodes: usage mistakes exit 2, failures 1 with a message that
// names the problem, success 0.
func TestRunExitCodes(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "drive")
	tests := []struct {
		name     string
		args     []string
		wantCode int
		wantErr  string // substring of stderr
		wantOut  string // substring of stdout
	}{
		{"no command", nil, 2, "usage: stopgap COMMAND", ""},
		{"unknown command", []string{"fly"}, 2, `unknown command "fly"`, ""},
		{"help lists the caution", []string{"help"}, 0, vocab.CautionTitle + ". " + vocab.Caution, ""},
		{"replay without flags", []string{"replay"}, 2, "--drive and --out are required", ""},
		{"replay bad flag", []string{"replay", "--nope"}, 2, "flag provided but not defined", ""},
		{"replay missing drive", []string{"replay", "--quiet", "--drive", filepath.Join(dir, "none"), "--out", filepath.Join(dir, "r0")}, 1, "camera.json", ""},
		{"simdrive", []string{"simdrive", "--quiet", "--out", drive, "--width", "160", "--height", "90", "--duration-s", "2"}, 0, "", "recording written"},
		{"simdrive refuses an existing directory", []string{"simdrive", "--quiet", "--out", drive, "--width", "160", "--height", "90", "--duration-s", "1"}, 1, drive, ""},
		{"replay", []string{"replay", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "r1"), "--frame-loss-rate", "0.3", "--burst-ms", "100"}, 0, "CAUTION", "report: "},
		{"replay bad cutoff", []string{"replay", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "r2"), "--cutoff", "1.5"}, 1, "cutoff", ""},
		{"demo --offline after other flags", []string{"demo", "--out", dir, "--offline", "-h"}, 0, "usage: stopgap demo --offline", ""},
		{"demo --offline=false is the live demo", []string{"demo", "--offline=false", "-h"}, 0, "Live demo", ""},
		{"replay with the old --loss-rate warns and still works", []string{"replay", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "r3"), "--loss-rate", "0.3", "--burst-ms", "100"}, 0,
			"--loss-rate is deprecated and will be removed; use --frame-loss-rate", "report: "},
		{"demo with the old --link-loss warns", []string{"demo", "--link-loss", "0.02", "-h"}, 0, "use --packet-loss-rate", ""},
		{"relay help names the sender's start bitrate", []string{"relay", "-h"}, 0, "-sender-start-kbps", ""},
		{"relay negative start bitrate", []string{"relay", "--camera", "camera.json", "--sender-start-kbps", "-5"}, 2, "--sender-start-kbps wants kbit/s", ""},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := run(context.Background(), tc.args, &out, &errb)
			if code != tc.wantCode {
				t.Fatalf("exit %d, want %d\nstdout: %s\nstderr: %s", code, tc.wantCode, out.String(), errb.String())
			}
			if !strings.Contains(errb.String(), tc.wantErr) {
				t.Errorf("stderr %q does not contain %q", errb.String(), tc.wantErr)
			}
			if !strings.Contains(out.String(), tc.wantOut) {
				t.Errorf("stdout %q does not contain %q", out.String(), tc.wantOut)
			}
		})
	}
	if _, err := os.Stat(filepath.Join(dir, "r1", "report.html")); err != nil {
		t.Errorf("replay wrote no report: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "r0")); !os.IsNotExist(err) {
		t.Errorf("a failed replay left its output directory (stat: %v)", err)
	}
}
