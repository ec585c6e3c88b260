package api

import (
	"bytes"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"regexp"
	"slices"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller/internal/fakeservice"
)

type openapiDoc struct {
	OpenAPI string `json:"openapi"`
	Paths   map[string]map[string]struct {
		Security   []map[string][]string      `json:"security"`
		Responses  map[string]json.RawMessage `json:"responses"`
		Parameters []struct {
			Name string `json:"name"`
			In   string `json:"in"`
		} `json:"parameters"`
		RequestBody json.RawMessage `json:"requestBody"`
	} `json:"paths"`
	Components map[string]map[string]json.RawMessage `json:"components"`
}

// The OpenAPI description and the routes served are the same set: every route registered is
// described (method and path), every path described is served by its own route (not the
// fallbacks for a wrong method or an unknown path), and the description holds together.
func TestOpenAPIDescribesEveryRoute(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	var doc openapiDoc
	if err := json.Unmarshal(OpenAPI(), &doc); err != nil {
		t.Fatalf("openapi.json: %v", err)
	}
	if !strings.HasPrefix(doc.OpenAPI, "3.") {
		t.Fatalf("openapi %q, want 3.x", doc.OpenAPI)
	}
	var registered, described []string
	writes := map[string]bool{}
	for _, rt := range e.a.table {
		registered = append(registered, rt.method+" "+rt.path)
		writes[rt.method+" "+rt.path] = rt.write
	}
	param := regexp.MustCompile(`\{([a-z]+)\}`)
	for path, ops := range doc.Paths {
		for method, op := range ops {
			key := strings.ToUpper(method) + " " + path
			described = append(described, key)
			r := httptest.NewRequest(strings.ToUpper(method), param.ReplaceAllString(path, "1"), nil)
			if _, pattern := e.a.mux.Handler(r); pattern != key {
				t.Errorf("%s is described but served by %q", key, pattern)
			}
			var ok2xx bool
			for code := range op.Responses {
				ok2xx = ok2xx || code[0] == '2'
			}
			if !ok2xx {
				t.Errorf("%s: no success response described", key)
			}
			if writes[key] {
				if _, ok := op.Responses["401"]; !ok || len(op.Security) == 0 {
					t.Errorf("%s is a write: its 401 and security are not described", key)
				}
			}
			for _, m := range param.FindAllStringSubmatch(path, -1) {
				if !slices.ContainsFunc(op.Parameters, func(p struct {
					Name string `json:"name"`
					In   string `json:"in"`
				}) bool {
					return p.Name == m[1] && p.In == "path"
				}) {
					t.Errorf("%s: path parameter %s not described", key, m[1])
				}
			}
		}
	}
	slices.Sort(registered)
	slices.Sort(described)
	if !slices.Equal(registered, described) {
		t.Fatalf("routes served:\n%s\nroutes described:\n%s", strings.Join(registered, "\n"), strings.Join(described, "\n"))
	}
	// Every reference resolves.
	refs := regexp.MustCompile(`"\$ref":\s*"#/components/([a-zA-Z]+)/([a-zA-Z0-9]+)"`).FindAllSubmatch(OpenAPI(), -1)
	if len(refs) == 0 {
		t.Fatal("no references found: the pattern is wrong")
	}
	for _, m := range refs {
		if _, ok := doc.Components[string(m[1])][string(m[2])]; !ok {
			t.Errorf("reference to %s/%s, which is not there", m[1], m[2])
		}
	}
	w := e.do("GET", "/api/v1/openapi.json", "")
	if expect(t, w, http.StatusOK, "openapi.json"); !bytes.Equal(w.Body.Bytes(), OpenAPI()) || w.Header().Get("Content-Type") != "application/json" {
		t.Fatal("/api/v1/openapi.json does not serve the description")
	}
}
