package station

import (
	"bytes"
	"encoding/json"
	"errors"
	"go/parser"
	"go/token"
	"io"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

const module = "github.com/tankd/tankd"

// importExceptions are files outside sim/ and cmd/ allowed to import the simulator, each with
// the reason; none today (the controller's tests run on controller/internal/fakeloop).
var importExceptions = map[string]string{}

// The controller, the drivers and everything else a real installation runs must not need the
// simulator: no package outside sim/ and cmd/ may import anything under sim/, in its code or its
// tests (the commands choose the simulator; nothing below them may).
func TestNothingOutsideSimImportsSim(t *testing.T) {
	goTool, err := exec.LookPath("go")
	if err != nil {
		t.Fatalf("the go command is needed to list the module's packages: %v", err)
	}
	cmd := exec.Command(goTool, "list", "-e", "-json", "./...")
	cmd.Dir = filepath.Join("..", "..") // the module's root
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("go list: %v\n%s", err, stderr.String())
	}
	type pkg struct {
		ImportPath, Dir                                              string
		GoFiles, CgoFiles, TestGoFiles, XTestGoFiles, IgnoredGoFiles []string
	}
	used := map[string]bool{}
	n := 0
	dec := json.NewDecoder(bytes.NewReader(out))
	for {
		var p pkg
		if err := dec.Decode(&p); errors.Is(err, io.EOF) {
			break
		} else if err != nil {
			t.Fatalf("go list output: %v", err)
		}
		n++
		rel := strings.TrimPrefix(strings.TrimPrefix(p.ImportPath, module), "/")
		if rel == "sim" || strings.HasPrefix(rel, "sim/") || strings.HasPrefix(rel, "cmd/") {
			continue
		}
		files := append(append(append(append(append([]string{}, p.GoFiles...), p.CgoFiles...), p.TestGoFiles...), p.XTestGoFiles...), p.IgnoredGoFiles...)
		for _, f := range files {
			name := filepath.ToSlash(filepath.Join(rel, f))
			for _, imp := range imports(t, filepath.Join(p.Dir, f)) {
				if imp != module+"/sim" && !strings.HasPrefix(imp, module+"/sim/") {
					continue
				}
				if _, ok := importExceptions[name]; ok {
					used[name] = true
					continue
				}
				t.Errorf("%s imports %s: nothing outside sim/ and cmd/ may depend on the simulator", name, imp)
			}
		}
	}
	if n < 20 {
		t.Fatalf("go list found only %d packages: the listing is broken", n)
	}
	for name, why := range importExceptions {
		if !used[name] {
			t.Errorf("%s no longer imports the simulator (%s): remove its exception", name, why)
		}
	}
}

// imports lists the import paths of one Go file.
func imports(t *testing.T, path string) []string {
	t.Helper()
	f, err := parser.ParseFile(token.NewFileSet(), path, nil, parser.ImportsOnly)
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	var out []string
	for _, s := range f.Imports {
		p, err := strconv.Unquote(s.Path.Value)
		if err != nil {
			t.Fatalf("%s: import %s: %v", path, s.Path.Value, err)
		}
		out = append(out, p)
	}
	return out
}
