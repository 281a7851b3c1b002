// Package layering holds the test that keeps the dependency direction of
// DEVELOPERS.md ("stream -> filter -> predictor -> stream out; bench drives
// the same packages") true as the code changes.
package layering

import (
	"go/build"
	"io/fs"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"testing"
)

const module = "stopgap"

// rules lists, per package, module packages it must not depend on,
// directly or through others. A prefix ending in "/" covers a whole tree.
var rules = []struct {
	pkg    string
	banned []string
	why    string
}{
	{"predictor", []string{"stopgap/stream/"}, "data flows from stream into predictor, never back"},
	{"stream/simvehicle", []string{"stopgap/bench"}, "the simulated vehicle uses the link model (lossmodel), not the evaluation package"},
	{"stream/rtpudp", []string{"stopgap/stream/whip"}, "the plain RTP ingest implements ingest.Session; it does not borrow from the WebRTC ingest"},
	{"internal/lossmodel", []string{"stopgap/bench", "stopgap/predictor", "stopgap/stream/"}, "the link model is small and cgo-free"},
	{"stream/ingest", []string{"stopgap/stream/whip", "stopgap/stream/rtpudp", "stopgap/stream/relay"}, "the ingest interface is neutral"},
	{"filter", []string{"stopgap/predictor", "stopgap/bench", "stopgap/stream/"}, "the filter sits between stream and predictor"},
	{"internal/camera", []string{"stopgap/predictor", "stopgap/stream/", "stopgap/bench", "stopgap/filter", "stopgap/internal/cvref"}, "the one camera type is shared by stream and predictor, so it depends on neither"},
	{"stream/recording", []string{"stopgap/predictor", "stopgap/bench", "stopgap/internal/cvref"}, "the recording format stays cgo-free; it shares the camera type through internal/camera"},
}

// moduleRoot is the directory of go.mod, two levels above this file.
func moduleRoot(t *testing.T) string {
	_, file, _, ok := runtime.Caller(0)
	if !ok {
		t.Fatal("no caller information")
	}
	return filepath.Join(filepath.Dir(file), "..", "..")
}

// deps returns every module package pkg imports, directly or not, with the
// import chain that reaches each (non-test files only).
func deps(t *testing.T, root, pkg string) map[string][]string {
	t.Helper()
	chain := map[string][]string{pkg: {pkg}}
	queue := []string{pkg}
	for len(queue) > 0 {
		p := queue[0]
		queue = queue[1:]
		bp, err := build.Default.ImportDir(filepath.Join(root, strings.TrimPrefix(p, module)), 0)
		if err != nil {
			t.Fatalf("reading package %s: %v", p, err)
		}
		for _, imp := range bp.Imports {
			if imp != module && !strings.HasPrefix(imp, module+"/") {
				continue
			}
			if _, seen := chain[imp]; seen {
				continue
			}
			chain[imp] = append(slices.Clone(chain[p]), imp)
			queue = append(queue, imp)
		}
	}
	return chain
}

// bannedBy reports the first entry of banned that covers dep.
func bannedBy(dep string, banned []string) (string, bool) {
	for _, b := range banned {
		if dep == b || (strings.HasSuffix(b, "/") && strings.HasPrefix(dep, b)) {
			return b, true
		}
	}
	return "", false
}

func TestDependencyDirection(t *testing.T) {
	root := moduleRoot(t)
	for _, r := range rules {
		t.Run(r.pkg, func(t *testing.T) {
			for dep, via := range deps(t, root, module+"/"+r.pkg) {
				if b, bad := bannedBy(dep, r.banned); bad {
					t.Errorf("%s depends on %s (matches %q) through %s: %s", r.pkg, dep, b, strings.Join(via, " -> "), r.why)
				}
			}
		})
	}
}

// TestNoPackageImportsCmd: cmd/ only wires; no package imports it.
func TestNoPackageImportsCmd(t *testing.T) {
	root := moduleRoot(t)
	err := filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if !d.IsDir() {
			return nil
		}
		if name := d.Name(); name == "testdata" || (strings.HasPrefix(name, ".") && path != root) {
			return filepath.SkipDir
		}
		rel, err := filepath.Rel(root, path)
		if err != nil {
			return err
		}
		if rel == "cmd" {
			return filepath.SkipDir
		}
		bp, err := build.Default.ImportDir(path, 0)
		if err != nil {
			return nil // no Go files here
		}
		for _, imp := range bp.Imports {
			if strings.HasPrefix(imp, module+"/cmd/") {
				t.Errorf("%s imports %s; move the code it needs into a package", filepath.ToSlash(rel), imp)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}
