package layering

import (
	"go/ast"
	"go/build"
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"strings"
	"testing"
)

// TestOneCameraType: the camera is one struct type, defined in
// internal/camera; elsewhere the name may only be an alias of it
// (predictor.Camera, recording.Camera), never a second struct that would
// need converting and could drift from the first.
func TestOneCameraType(t *testing.T) {
	root := moduleRoot(t)
	var structs []string
	fset := token.NewFileSet()
	err := filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); name == "testdata" || (strings.HasPrefix(name, ".") && path != root) {
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") {
			return nil
		}
		f, err := parser.ParseFile(fset, path, nil, parser.SkipObjectResolution)
		if err != nil {
			return err
		}
		ast.Inspect(f, func(n ast.Node) bool {
			ts, ok := n.(*ast.TypeSpec)
			if !ok || ts.Name.Name != "Camera" || ts.Assign.IsValid() {
				return true
			}
			if _, isStruct := ts.Type.(*ast.StructType); isStruct {
				rel, _ := filepath.Rel(root, fset.Position(ts.Pos()).Filename)
				structs = append(structs, filepath.ToSlash(rel))
			} else {
				rel, _ := filepath.Rel(root, path)
				t.Errorf("%s: type Camera is a defined type, not an alias of camera.Camera; write type Camera = camera.Camera", filepath.ToSlash(rel))
			}
			return true
		})
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(structs) != 1 || structs[0] != "internal/camera/camera.go" {
		t.Fatalf("type Camera struct is defined in %v, want exactly once, in internal/camera/camera.go (use an alias elsewhere)", structs)
	}
}

// TestCgoFree: these packages and every module package they import build
// without cgo, so the tools that read recordings and camera files run
// where OpenCV and libvpx are not installed.
func TestCgoFree(t *testing.T) {
	root := moduleRoot(t)
	ctx := build.Default
	ctx.CgoEnabled = true // list the cgo files whatever CGO_ENABLED says
	for _, pkg := range []string{"internal/camera", "stream/recording"} {
		for dep, via := range deps(t, root, module+"/"+pkg) {
			bp, err := ctx.ImportDir(filepath.Join(root, strings.TrimPrefix(dep, module)), 0)
			if err != nil {
				t.Fatalf("reading package %s: %v", dep, err)
			}
			if len(bp.CgoFiles) > 0 {
				t.Errorf("%s needs cgo (%v) through %s", pkg, bp.CgoFiles, strings.Join(via, " -> "))
			}
		}
	}
}
