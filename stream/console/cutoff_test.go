package console

import (
	"encoding/json"
	"errors"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func quietLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

func ptr[T any](v T) *T { return &v }

func TestNewConfigValidation(t *testing.T) {
	tok := strings.Repeat("t", MinTokenLen)
	cases := []struct {
		name string
		cfg  Config
		want error
	}{
		{"zero config works", Config{}, nil},
		{"short token", Config{Token: "short"}, ErrWeakToken},
		{"token with space", Config{Token: tok + " x"}, ErrBadConfig},
		{"min above max", Config{Token: tok, Limits: Limits{MinCutoff: 0.8, MaxCutoff: 0.5}}, ErrBadConfig},
		{"max above 1", Config{Token: tok, Limits: Limits{MinCutoff: 0.1, MaxCutoff: 1.5}}, ErrBadConfig},
		{"negative min", Config{Token: tok, Limits: Limits{MinCutoff: -0.1, MaxCutoff: 0.5}}, ErrBadConfig},
		{"profile outside limits", Config{Token: tok, Limits: Limits{MinCutoff: 0.3, MaxCutoff: 0.9},
			Profiles: []Profile{{"city", 0.95}}}, ErrCutoffOutOfLimits},
		{"duplicate profile", Config{Token: tok, Profiles: []Profile{{"a", 0.5}, {"a", 0.6}}}, ErrBadConfig},
		{"bad profile name", Config{Token: tok, Profiles: []Profile{{"a/b", 0.5}}}, ErrBadProfileName},
		{"unknown active", Config{Token: tok, Profiles: []Profile{{"a", 0.5}}, ActiveProfile: "b"}, ErrUnknownProfile},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			tc.cfg.Logger = quietLogger()
			c, err := New(tc.cfg)
			if !errors.Is(err, tc.want) {
				t.Fatalf("New err = %v, want %v", err, tc.want)
			}
			if c != nil {
				c.Close()
			}
		})
	}
}

func TestZeroConfigDefaults(t *testing.T) {
	c, err := New(Config{Logger: quietLogger()})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if len(c.Token()) != 43 {
		t.Errorf("generated token has %d characters, want 43 (32 bytes base64url)", len(c.Token()))
	}
	st := c.State()
	if st.Profile != "default" || st.Cutoff != DefaultCutoff || st.Limits != (Limits{0, 1}) {
		t.Errorf("state = %+v", st)
	}
	if c.Cutoff() != DefaultCutoff || c.Profile() != "default" {
		t.Errorf("Cutoff() = %v, Profile() = %q", c.Cutoff(), c.Profile())
	}
	if got := c.PageURL("http://127.0.0.1:8088/"); got != "http://127.0.0.1:8088/#token="+c.Token() {
		t.Errorf("PageURL = %q", got)
	}
}

// TestSetCutoff covers the request semantics and the limits, edges
// inclusive.
func TestSetCutoff(t *testing.T) {
	lim := Limits{MinCutoff: 0.3, MaxCutoff: 0.9}
	cases := []struct {
		name        string
		req         CutoffRequest
		wantErr     error
		wantProfile string
		wantCutoff  float64
	}{
		{"cutoff only changes active", CutoffRequest{Cutoff: ptr(0.75)}, nil, "city", 0.75},
		{"lower edge inclusive", CutoffRequest{Cutoff: ptr(0.3)}, nil, "city", 0.3},
		{"upper edge inclusive", CutoffRequest{Cutoff: ptr(0.9)}, nil, "city", 0.9},
		{"just below min", CutoffRequest{Cutoff: ptr(0.2999)}, ErrCutoffOutOfLimits, "city", 0.6},
		{"just above max", CutoffRequest{Cutoff: ptr(0.9001)}, ErrCutoffOutOfLimits, "city", 0.6},
		{"negative", CutoffRequest{Cutoff: ptr(-1.0)}, ErrCutoffOutOfLimits, "city", 0.6},
		{"switch profile", CutoffRequest{Profile: ptr("highway")}, nil, "highway", 0.8},
		{"switch and set", CutoffRequest{Profile: ptr("highway"), Cutoff: ptr(0.85)}, nil, "highway", 0.85},
		{"create profile", CutoffRequest{Profile: ptr("yard"), Cutoff: ptr(0.4)}, nil, "yard", 0.4},
		{"unknown profile without cutoff", CutoffRequest{Profile: ptr("yard")}, ErrUnknownProfile, "city", 0.6},
		{"create outside limits", CutoffRequest{Profile: ptr("yard"), Cutoff: ptr(0.95)}, ErrCutoffOutOfLimits, "city", 0.6},
		{"bad name", CutoffRequest{Profile: ptr("<script>"), Cutoff: ptr(0.5)}, ErrBadProfileName, "city", 0.6},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var calls []Profile
			c, err := New(Config{Logger: quietLogger(), Limits: lim,
				Profiles:       []Profile{{"city", 0.6}, {"highway", 0.8}},
				OnCutoffChange: func(p string, v float64) { calls = append(calls, Profile{p, v}) }})
			if err != nil {
				t.Fatal(err)
			}
			defer c.Close()
			_, err = c.SetCutoff(tc.req)
			if !errors.Is(err, tc.wantErr) {
				t.Fatalf("err = %v, want %v", err, tc.wantErr)
			}
			if c.Profile() != tc.wantProfile || c.Cutoff() != tc.wantCutoff {
				t.Errorf("now %q %v, want %q %v", c.Profile(), c.Cutoff(), tc.wantProfile, tc.wantCutoff)
			}
			if tc.wantErr == nil && (len(calls) != 1 || calls[0] != (Profile{tc.wantProfile, tc.wantCutoff})) {
				t.Errorf("OnCutoffChange calls = %v", calls)
			}
			if tc.wantErr != nil && len(calls) != 0 {
				t.Errorf("OnCutoffChange called on error: %v", calls)
			}
		})
	}
}

func TestLimitErrorMessage(t *testing.T) {
	err := error(&LimitError{Cutoff: 0.97, Limits: Limits{0.3, 0.9}})
	want := "cutoff 0.97 is outside the administrator's limits [0.3, 0.9]"
	if !strings.Contains(err.Error(), want) {
		t.Errorf("message %q lacks %q", err, want)
	}
}

func TestTooManyProfiles(t *testing.T) {
	c, err := New(Config{Logger: quietLogger()})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	for i := 1; i < MaxProfiles; i++ {
		if _, err := c.SetCutoff(CutoffRequest{Profile: ptr(string(rune('a'+i)) + "p"), Cutoff: ptr(0.5)}); err != nil {
			t.Fatalf("profile %d: %v", i, err)
		}
	}
	if _, err := c.SetCutoff(CutoffRequest{Profile: ptr("one-more"), Cutoff: ptr(0.5)}); !errors.Is(err, ErrTooManyProfiles) {
		t.Errorf("err = %v, want ErrTooManyProfiles", err)
	}
}

func TestProfilesFilePersistence(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "profiles.json")
	cfg := Config{Logger: quietLogger(), Limits: Limits{0.2, 0.9}, Profiles: []Profile{{"city", 0.6}}, ProfilesPath: path}
	c, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Errorf("file written before any change: %v", err)
	}
	if _, err := c.SetCutoff(CutoffRequest{Profile: ptr("night"), Cutoff: ptr(0.85)}); err != nil {
		t.Fatal(err)
	}
	c.Close()
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 {
		t.Errorf("directory holds %d entries, want only profiles.json (no temporary files left)", len(entries))
	}

	// a new console reads the file: the created profile and the active one survive
	cfg.Profiles = nil
	c2, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer c2.Close()
	if c2.Profile() != "night" || c2.Cutoff() != 0.85 || len(c2.State().Profiles) != 2 {
		t.Errorf("reloaded: %+v", c2.State())
	}

	// the administrator tightened the limits since: clamp, do not refuse to start
	cfg.Limits = Limits{0.2, 0.8}
	c3, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	defer c3.Close()
	if c3.Cutoff() != 0.8 {
		t.Errorf("cutoff 0.85 under limits [0.2, 0.8] loaded as %v, want clamped to 0.8", c3.Cutoff())
	}
}

func TestProfilesFileErrors(t *testing.T) {
	cases := []struct {
		name     string
		content  string
		wantLine int
	}{
		{"syntax error on line 3", "{\n  \"active\": \"a\",\n  \"profiles\": [ oops ]\n}", 3},
		{"wrong type on line 2", "{\"profiles\": [\n {\"name\": \"a\", \"cutoff\": \"high\"}]}", 2},
		{"unknown field", "{\"active\": \"a\", \"extra\": 1, \"profiles\": [{\"name\": \"a\", \"cutoff\": 0.5}]}", 1},
		{"no profiles", "{\"active\": \"a\", \"profiles\": []}", 0},
		{"trailing data", "{\"profiles\": [{\"name\": \"a\", \"cutoff\": 0.5}]}\n{}", 2},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "p.json")
			os.WriteFile(path, []byte(tc.content), 0o600)
			_, err := New(Config{Logger: quietLogger(), ProfilesPath: path})
			var pfe *ProfilesFileError
			if !errors.As(err, &pfe) {
				t.Fatalf("err = %v, want *ProfilesFileError", err)
			}
			if pfe.Path != path || pfe.Line != tc.wantLine {
				t.Errorf("error at %s:%d, want %s:%d (%v)", pfe.Path, pfe.Line, path, tc.wantLine, err)
			}
			if !strings.Contains(err.Error(), path) {
				t.Errorf("message %q does not name the file", err)
			}
		})
	}
}

func TestProfilesFileWriteFailureChangesNothing(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "sub", "profiles.json") // directory does not exist
	c, err := New(Config{Logger: quietLogger(), ProfilesPath: path})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	before := c.Cutoff()
	_, err = c.SetCutoff(CutoffRequest{Cutoff: ptr(0.7)})
	var pfe *ProfilesFileError
	if !errors.As(err, &pfe) {
		t.Fatalf("err = %v, want *ProfilesFileError", err)
	}
	if c.Cutoff() != before {
		t.Errorf("cutoff changed to %v although it could not be saved", c.Cutoff())
	}
}

// FuzzParseCutoffRequest: any body gives a request or ErrBadRequest, never a
// panic; an accepted request, encoded again with encoding/json, parses back
// to an equal request.
func FuzzParseCutoffRequest(f *testing.F) {
	for _, s := range []string{`{"cutoff":0.5}`, `{"cutoff":0.7}`, `{"Cutoff":0.3,"PROFILE":"night"}`, `{"profile":"city"}`, `{"profile":"a","cutoff":1}`, `{}`, `[]`,
		`{"cutoff":"x"}`, `{"cutoff":1e999}`, `{"cutoff":0.5}{}`, `{"zzz":1}`, ``, `null`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		req, err := parseCutoffRequest(data)
		if err != nil {
			if !errors.Is(err, ErrBadRequest) {
				t.Fatalf("error %v does not wrap ErrBadRequest", err)
			}
			return
		}
		// Independent recomputation: a plain decode into a map holds the
		// same profile and cutoff (keys match case-insensitively in
		// encoding/json; skip bodies that give one key twice).
		var raw map[string]any
		if err := json.Unmarshal(data, &raw); err != nil {
			t.Fatalf("accepted a body that is not one JSON object: %v", err)
		}
		folded := map[string]any{}
		for k, v := range raw {
			folded[strings.ToLower(k)] = v
		}
		if len(folded) == len(raw) {
			if v, ok := folded["cutoff"].(float64); (req.Cutoff != nil) != ok || (ok && *req.Cutoff != v) {
				t.Fatalf("body %s: cutoff %v in the body, request %s", data, folded["cutoff"], reqJSON(req))
			}
			if v, ok := folded["profile"].(string); (req.Profile != nil) != ok || (ok && *req.Profile != v) {
				t.Fatalf("body %s: profile %v in the body, request %s", data, folded["profile"], reqJSON(req))
			}
		}
		// Round trip: the accepted request, encoded as a client would
		// send it, parses back to the same request, and its encoding is
		// a fixed point.
		js, err := json.Marshal(req)
		if err != nil {
			t.Fatalf("accepted request %+v cannot be encoded: %v", req, err)
		}
		back, err := parseCutoffRequest(js)
		if err != nil {
			t.Fatalf("re-encoded request %s refused: %v", js, err)
		}
		if !sameRequest(req, back) {
			t.Fatalf("round trip changed the request: %s -> %s", data, js)
		}
		if js2, _ := json.Marshal(back); string(js2) != string(js) {
			t.Fatalf("re-encoding is not stable: %s then %s", js, js2)
		}
	})
}

// reqJSON shows a request for failure messages.
func reqJSON(r CutoffRequest) string {
	b, _ := json.Marshal(r)
	return string(b)
}

// sameRequest compares two requests by value (nil and set fields alike).
func sameRequest(a, b CutoffRequest) bool {
	if (a.Profile == nil) != (b.Profile == nil) || (a.Cutoff == nil) != (b.Cutoff == nil) {
		return false
	}
	return (a.Profile == nil || *a.Profile == *b.Profile) && (a.Cutoff == nil || *a.Cutoff == *b.Cutoff)
}

// FuzzProfilesFile: any file content gives profiles or a *ProfilesFileError
// with a line inside the file.
func FuzzProfilesFile(f *testing.F) {
	f.Add([]byte(`{"active":"a","profiles":[{"name":"a","cutoff":0.5}]}`))
	f.Add([]byte("{\n\"profiles\": [\n{\"name\": 1}]}"))
	f.Add([]byte("\n\n\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		_, err := parseProfilesFile("p.json", data)
		if err == nil {
			return
		}
		var pfe *ProfilesFileError
		if !errors.As(err, &pfe) {
			t.Fatalf("error %v is not a *ProfilesFileError", err)
		}
		if lines := 1 + strings.Count(string(data), "\n"); pfe.Line < 0 || pfe.Line > lines {
			t.Fatalf("line %d outside a %d-line file", pfe.Line, lines)
		}
	})
}
