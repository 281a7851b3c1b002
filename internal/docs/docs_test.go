// Package docs holds the tests that keep README.md and DEVELOPERS.md in
// step with the code: the shared words of package vocab, and the commands
// the contributor guide asks for.
package docs

import (
	"go/ast"
	"go/parser"
	"go/token"
	"os"
	"path/filepath"
	"regexp"
	"runtime"
	"slices"
	"strings"
	"testing"

	"stopgap/internal/camera"
	"stopgap/internal/display"
	"stopgap/internal/vocab"
)

// root is the module root, two levels above this file.
func root(t *testing.T) string {
	_, file, _, ok := runtime.Caller(0)
	if !ok {
		t.Fatal("no caller information")
	}
	return filepath.Join(filepath.Dir(file), "..", "..")
}

func read(t *testing.T, rel string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(root(t), rel))
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// plain turns Markdown prose into plain words: block-quote markers,
// emphasis and line breaks removed, spaces collapsed.
func plain(md string) string {
	var b strings.Builder
	for _, l := range strings.Split(md, "\n") {
		b.WriteString(strings.TrimPrefix(strings.TrimSpace(l), ">"))
		b.WriteByte(' ')
	}
	s := strings.NewReplacer("**", "", "*", "", "`", "").Replace(b.String())
	return strings.Join(strings.Fields(s), " ")
}

// TestReadmeCaution: the README carries the shared caution word for word.
func TestReadmeCaution(t *testing.T) {
	want := vocab.CautionTitle + ". " + vocab.Caution
	if got := plain(read(t, "README.md")); !strings.Contains(got, want) {
		t.Errorf("README.md does not carry the shared caution of package vocab:\n%s", want)
	}
}

// oldAgeWords are the names the frame age had before it was called
// vocab.AgeTerm everywhere.
var oldAgeWords = []string{"gap age", "ms old", "since last real frame", "age of real picture", "last picture", "no signal"}

// TestOneAgeTerm: no user-facing text uses an old name of the picture age
// (or the old name of the console's unknown state).
func TestOneAgeTerm(t *testing.T) {
	files := []string{"README.md", "DEVELOPERS.md", "stream/console/web/index.html", "stream/console/web/console.js",
		"bench/report_html.go", "bench/report_examples.go", "bench/report_plot.go", "bench/calplot.go", "predictor/label.go"}
	for _, f := range files {
		text := strings.ToLower(read(t, f))
		for _, old := range oldAgeWords {
			if strings.Contains(text, old) {
				t.Errorf("%s says %q; the frame age is %q everywhere", f, old, vocab.AgeTerm)
			}
		}
	}
	if !strings.Contains(read(t, "stream/console/web/console.js"), `"`+vocab.AgeTerm+` "`) {
		t.Errorf("console.js does not name the frame age %q", vocab.AgeTerm)
	}
}

// goTest matches the go test commands of the guides with their package
// list and options.
var goTest = regexp.MustCompile("go test ((?:\\./[A-Za-z0-9_/.]+ ?)+)([^\\n`]*)")

// TestGuideCommandsExist: every go test command in the guides names
// packages of this module and -run/-bench/-fuzz patterns that match a
// test there, and every ./dev.sh subcommand exists, so contributors are
// only asked for commands that are part of the project.
func TestGuideCommandsExist(t *testing.T) {
	dir := root(t)
	funcs := map[string][]string{}
	testFuncs := func(pkg string) []string {
		if fs, ok := funcs[pkg]; ok {
			return fs
		}
		var names []string
		matches, _ := filepath.Glob(filepath.Join(dir, pkg, "*_test.go"))
		if len(matches) == 0 {
			t.Errorf("package %s has no tests (or does not exist)", pkg)
		}
		for _, m := range matches {
			f, err := parser.ParseFile(token.NewFileSet(), m, nil, parser.SkipObjectResolution)
			if err != nil {
				t.Fatal(err)
			}
			for _, d := range f.Decls {
				if fd, ok := d.(*ast.FuncDecl); ok && fd.Recv == nil {
					names = append(names, fd.Name.Name)
				}
			}
		}
		funcs[pkg] = names
		return names
	}
	flagRe := regexp.MustCompile(`-(run|bench|fuzz) '?([^ ']+)'?`)
	for _, guide := range []string{"DEVELOPERS.md", "README.md"} {
		for _, m := range goTest.FindAllStringSubmatch(read(t, guide), -1) {
			pkgs, opts := strings.Fields(m[1]), m[2]
			for _, fm := range flagRe.FindAllStringSubmatch(opts, -1) {
				kind, pat := fm[1], fm[2]
				if pat == "^$" || pat == "." {
					continue
				}
				prefix := map[string]string{"run": "Test", "bench": "Benchmark", "fuzz": "Fuzz"}[kind]
				// go test splits -run and -bench at slashes and matches the
				// first element against the top-level functions (the rest
				// names subtests).
				if kind != "fuzz" {
					pat, _, _ = strings.Cut(pat, "/")
				}
				re, err := regexp.Compile(pat)
				if err != nil {
					t.Errorf("%s: go test %s -%s %q: %v", guide, m[1], kind, pat, err)
					continue
				}
				for _, pkg := range pkgs {
					found := false
					for _, name := range testFuncs(strings.TrimPrefix(pkg, "./")) {
						if strings.HasPrefix(name, prefix) && re.MatchString(name) {
							found = true
							break
						}
					}
					if !found {
						t.Errorf("%s asks for go test %s -%s %s, which matches no %s function there", guide, pkg, kind, pat, prefix)
					}
				}
			}
		}
	}
	devsh := read(t, "dev.sh")
	for _, guide := range []string{"DEVELOPERS.md", "README.md"} {
		for _, m := range regexp.MustCompile(`\./dev\.sh ([a-z-]+)`).FindAllStringSubmatch(read(t, guide), -1) {
			if !strings.Contains(devsh, "\n  "+m[1]+")") {
				t.Errorf("%s asks for ./dev.sh %s, which dev.sh does not have", guide, m[1])
			}
		}
	}
}

// TestStateNamesOneSource: the names of the frame states are the String
// values of display.State, and every surface spells them that way: the
// console script's list of states (all of display.States, in their order)
// and a style for each, the README, and the replay report's template for
// the states a replay shows (LIVE, PREDICTED, STALE).
func TestStateNamesOneSource(t *testing.T) {
	var quoted []string
	for _, s := range display.States {
		quoted = append(quoted, `"`+s.String()+`"`)
	}
	js := read(t, "stream/console/web/console.js")
	if want := "const STATES = [" + strings.Join(quoted, ", ") + "];"; !strings.Contains(js, want) {
		t.Errorf("console.js lacks %s", want)
	}
	css := read(t, "stream/console/web/console.css")
	readme := read(t, "README.md")
	for _, s := range display.States {
		name := s.String()
		if !strings.Contains(css, `body[data-state="`+name+`"]`) {
			t.Errorf("console.css has no style for %s", name)
		}
		if !strings.Contains(readme, name) {
			t.Errorf("README.md never names the state %s", name)
		}
	}
	report := read(t, "bench/report_html.go")
	for _, s := range []display.State{display.StateLive, display.StatePredicted, display.StateStale} {
		if !strings.Contains(report, s.String()) {
			t.Errorf("the report template never names the state %s", s)
		}
	}
}

// TestConsoleNoPictureWords: the console says vocab.NoPicture for a tick
// with no picture, in the same words the frame carries in its pixels.
func TestConsoleNoPictureWords(t *testing.T) {
	if js := read(t, "stream/console/web/console.js"); !strings.Contains(js, `const NO_PICTURE = "`+vocab.NoPicture+`";`) {
		t.Errorf("console.js does not take the words for NO_PICTURE from vocab.NoPicture (%q)", vocab.NoPicture)
	}
	if label := read(t, "predictor/label.go"); !strings.Contains(label, "strings.ToUpper(vocab.NoPicture)") {
		t.Errorf("predictor/label.go does not draw vocab.NoPicture on a NO_PICTURE frame")
	}
}

// projectCommands are the programs the contributor guide may ask for: the
// Go toolchain, the project's own scripts and binary, and the Python of
// the reference-metric script.
var projectCommands = map[string]bool{"go": true, "./dev.sh": true, "bin/stopgap": true, "/usr/bin/python3": true}

// TestGuideAsksOnlyProjectCommands: every command line in a shell block of
// DEVELOPERS.md starts (after VAR=value assignments) with one of
// projectCommands, so the guide never sends a contributor to a tool that
// is not part of the project.
func TestGuideAsksOnlyProjectCommands(t *testing.T) {
	inBlock := false
	for i, line := range strings.Split(read(t, "DEVELOPERS.md"), "\n") {
		switch {
		case strings.HasPrefix(line, "```sh"):
			inBlock = true
			continue
		case strings.HasPrefix(line, "```"):
			inBlock = false
			continue
		}
		f := strings.Fields(line)
		if !inBlock || len(f) == 0 || strings.HasPrefix(f[0], "#") {
			continue
		}
		for len(f) > 1 && strings.Contains(f[0], "=") {
			f = f[1:]
		}
		if !projectCommands[f[0]] {
			t.Errorf("DEVELOPERS.md line %d asks for %q, which is not part of the project", i+1, f[0])
		}
	}
}

// TestCameraKeys: the README's recording format lists camera.json's required
// and optional keys as the one reader (internal/camera) has them, in the
// same order.
func TestCameraKeys(t *testing.T) {
	var row string
	for _, line := range strings.Split(read(t, "README.md"), "\n") {
		if strings.HasPrefix(line, "| `camera.json` |") {
			row = line
		}
	}
	if row == "" {
		t.Fatal("README.md has no camera.json row in its recording format table")
	}
	req, opt, ok := strings.Cut(row, "Optional:")
	if !ok {
		t.Fatalf("the camera.json row does not say which keys are optional:\n%s", row)
	}
	_, req, ok = strings.Cut(req, "Required:")
	if !ok {
		t.Fatalf("the camera.json row does not say which keys are required:\n%s", row)
	}
	opt, _, _ = strings.Cut(opt, ".")
	quoted := func(s string) []string {
		var keys []string
		for i, part := range strings.Split(s, "`") {
			if i%2 == 1 && !strings.ContainsAny(part, " <>") {
				keys = append(keys, part)
			}
		}
		return keys
	}
	if got, want := quoted(req), camera.RequiredKeys(); !slices.Equal(got, want) {
		t.Errorf("README's required camera.json keys %v, the reader's %v", got, want)
	}
	if got, want := quoted(opt), camera.OptionalKeys(); !slices.Equal(got, want) {
		t.Errorf("README's optional camera.json keys %v, the reader's %v", got, want)
	}
}
