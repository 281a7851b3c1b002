package operator

import (
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/stream/console"
)

const testToken = "0123456789abcdef0123"

// newConsole starts a console kept in store under pol, as the relay's
// command does.
func newConsole(t *testing.T, store *Store, pol Policy) *console.Console {
	t.Helper()
	c, err := console.New(console.Config{Token: testToken, Store: NewConsoleStore(store, pol),
		Limits: console.Limits{MinCutoff: pol.MinCutoff, MaxCutoff: pol.MaxCutoff}, LimitsSource: pol.Path})
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func postCutoff(t *testing.T, h http.Handler, body string) (int, string) {
	t.Helper()
	req := httptest.NewRequest("POST", "/api/cutoff", strings.NewReader(body))
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Authorization", "Bearer "+testToken)
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	b, _ := io.ReadAll(rec.Result().Body)
	return rec.Code, string(b)
}

// TestConsoleChangeSurvivesRestart: a cutoff changed in the console is in
// the store and its history, and a console started afresh on the same store
// (a relay restart) uses it. A change beyond the policy is refused with a
// message naming the limits and the policy file, and changes nothing.
func TestConsoleChangeSurvivesRestart(t *testing.T) {
	dir := t.TempDir()
	polPath := filepath.Join(dir, "policy.json")
	os.WriteFile(polPath, []byte(`{"min_cutoff": 0.55, "max_cutoff": 0.95}`), 0o644)
	pol, err := LoadPolicy(polPath, true)
	if err != nil {
		t.Fatal(err)
	}
	s, _ := newTestStore(t)
	c1 := newConsole(t, s, pol)
	if c1.Profile() != "alice" || c1.Cutoff() != 0.6 {
		t.Fatalf("console started with %s %v, want alice 0.6 from the store", c1.Profile(), c1.Cutoff())
	}
	if code, body := postCutoff(t, c1, `{"cutoff": 0.75}`); code != http.StatusOK {
		t.Fatalf("POST /api/cutoff: %d %s", code, body)
	}
	code, body := postCutoff(t, c1, `{"cutoff": 0.5}`)
	if code != http.StatusBadRequest || !strings.Contains(body, polPath) || !strings.Contains(body, "0.55") {
		t.Errorf("change below the policy: %d %s; want 400 naming the limit and %s", code, body, polPath)
	}
	if c1.Cutoff() != 0.75 {
		t.Errorf("after the refusal the cutoff is %v, want 0.75", c1.Cutoff())
	}
	c1.Close()

	snap, err := s.Load()
	if err != nil {
		t.Fatal(err)
	}
	hist := snap.Profiles[snap.Find("alice")].History
	last := hist[len(hist)-1]
	if last.Actor != ActorConsole || last.Action != ActionCutoff || last.From != "0.6" || last.To != "0.75" {
		t.Errorf("last history entry %+v, want the console's change 0.6 -> 0.75", last)
	}
	c2 := newConsole(t, s, pol)
	defer c2.Close()
	if c2.Cutoff() != 0.75 {
		t.Errorf("after restart the cutoff is %v, want 0.75", c2.Cutoff())
	}
	var st console.ControlState
	req := httptest.NewRequest("GET", "/api/state", nil)
	req.Header.Set("Authorization", "Bearer "+testToken)
	rec := httptest.NewRecorder()
	c2.ServeHTTP(rec, req)
	if err := json.NewDecoder(rec.Body).Decode(&st); err != nil || st.Cutoff != 0.75 || st.Profile != "alice" {
		t.Errorf("GET /api/state after restart: %+v, %v", st, err)
	}
}

// TestConsoleSeesCommandLineChange: a change made by the command line while
// the console runs reaches the console's per-tick cutoff on ReloadProfiles,
// and the console's own next change starts from it (no lost update).
func TestConsoleSeesCommandLineChange(t *testing.T) {
	s, cli := newTestStore(t)
	c := newConsole(t, s, DefaultPolicy())
	defer c.Close()
	if _, err := cli.Change("alice", Set{Cutoff: ptr(0.8), Notes: ptr("from the CLI")}); err != nil {
		t.Fatal(err)
	}
	if err := c.ReloadProfiles(); err != nil {
		t.Fatal(err)
	}
	if c.Cutoff() != 0.8 {
		t.Errorf("console cutoff %v after reload, want 0.8", c.Cutoff())
	}
	if code, body := postCutoff(t, c, `{"cutoff": 0.9}`); code != http.StatusOK {
		t.Fatalf("%d %s", code, body)
	}
	snap, _ := s.Load()
	p := snap.Profiles[0]
	if p.Notes != "from the CLI" || p.Cutoff != 0.9 {
		t.Errorf("store after both writers: notes %q cutoff %v", p.Notes, p.Cutoff)
	}
}

// TestConsolePermissions: a console may not create a profile unless the
// policy allows it "add".
func TestConsolePermissions(t *testing.T) {
	s, _ := newTestStore(t)
	c := newConsole(t, s, DefaultPolicy())
	defer c.Close()
	code, body := postCutoff(t, c, `{"profile": "zed", "cutoff": 0.7}`)
	if code != http.StatusBadRequest || !strings.Contains(body, "allow.console") {
		t.Errorf("console creating a profile: %d %s; want a refusal naming allow.console", code, body)
	}
	pol := DefaultPolicy()
	pol.Allow[ActorConsole] = append(pol.Allow[ActorConsole], ActionAdd)
	c2 := newConsole(t, s, pol)
	defer c2.Close()
	if code, body := postCutoff(t, c2, `{"profile": "zed", "cutoff": 0.7}`); code != http.StatusOK {
		t.Errorf("console creating a profile when allowed: %d %s", code, body)
	}
	if c2.Profile() != "zed" {
		t.Errorf("profile %q, want zed", c2.Profile())
	}
}

// TestConsoleClampsStoredCutoffToPolicy: a cutoff stored under a wider
// policy is not used past a narrower one: the console clamps it (and warns)
// without rewriting the store.
func TestConsoleClampsStoredCutoffToPolicy(t *testing.T) {
	s, _ := newTestStore(t) // alice at 0.6
	pol, err := ParsePolicy("narrow.json", []byte(`{"min_cutoff": 0.7}`))
	if err != nil {
		t.Fatal(err)
	}
	c := newConsole(t, s, pol)
	defer c.Close()
	if c.Cutoff() != 0.7 {
		t.Errorf("console cutoff %v, want 0.7 (the policy's min_cutoff)", c.Cutoff())
	}
	if err := c.ReloadProfiles(); err != nil || c.Cutoff() != 0.7 {
		t.Errorf("after reload: %v, %v", c.Cutoff(), err)
	}
	snap, _ := s.Load()
	if snap.Profiles[0].Cutoff != 0.6 {
		t.Errorf("the store was rewritten: %v", snap.Profiles[0].Cutoff)
	}
}
