package operator

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func TestControlsEndpointRecords(t *testing.T) {
	dir := t.TempDir()
	w, err := CreateControls(dir)
	if err != nil {
		t.Fatal(err)
	}
	clock := time.UnixMicro(1_700_000_000_000_000)
	h := &ControlsChannel{Token: testToken, Log: w, Now: func() time.Time { clock = clock.Add(time.Millisecond); return clock }}
	post := func(token, ctype, body string) (int, string) {
		req := httptest.NewRequest("POST", "/api/controls", strings.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", ctype)
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		return rec.Code, rec.Body.String()
	}
	if code, _ := post("wrong-token-000000000", "application/json", `{"t_us": 1, "operator": "alice", "steer_rad": 0, "throttle": 0, "brake": 0}`); code != http.StatusUnauthorized {
		t.Errorf("wrong token: %d, want 401", code)
	}
	if code, _ := post(testToken, "text/plain", `{}`); code != http.StatusUnsupportedMediaType {
		t.Errorf("text/plain: %d, want 415", code)
	}
	code, body := post(testToken, "application/x-ndjson",
		"{\"t_us\": 10, \"operator\": \"alice\", \"steer_rad\": 0.05, \"throttle\": 0.3, \"brake\": 0}\n"+
			"{\"t_us\": 20, \"operator\": \"alice\", \"steer_rad\": 9, \"throttle\": 0.3, \"brake\": 0}\n"+
			"{\"t_us\": 30, \"operator\": \"alice\", \"steer_rad\": -0.01, \"throttle\": 0, \"brake\": 0.5}\n")
	if code != 200 || !strings.Contains(body, `"accepted":2`) || !strings.Contains(body, `"rejected":1`) || !strings.Contains(body, "line 2") {
		t.Errorf("batch: %d %s; want 2 accepted, line 2 rejected", code, body)
	}
	if code, body := post(testToken, "application/json", `{"t_us": 5}`); code != 400 || !strings.Contains(body, "required") {
		t.Errorf("incomplete sample: %d %s", code, body)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	got, err := ReadControls(filepath.Join(dir, ControlsFile))
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].TUs != 10 || got[1].Brake != 0.5 || got[0].ArrivalUs != got[1].ArrivalUs || got[0].ArrivalUs <= 1_700_000_000_000_000 {
		t.Errorf("recorded %+v", got)
	}
}

func TestParseControlsErrors(t *testing.T) {
	good := ControlsHeader + "\n10,100,0.1,0.2,0,\n"
	if rows, err := ParseControls("c.csv", []byte(good+"20,110,0.1")); err != nil || len(rows) != 1 {
		t.Errorf("torn last line: %v, %v; want it dropped", rows, err)
	}
	old := "t_us,t_arrival_us,steer_rad,throttle,brake\n10,100,0.1,0.2,0\n"
	if rows, err := ParseControls("c.csv", []byte(old)); err != nil || len(rows) != 1 || !rows[0].HasPedals || rows[0].HasSpeed {
		t.Errorf("file without speed_mps: %+v, %v; want one row with pedals", rows, err)
	}
	speed := ControlsHeader + "\n10,100,0.1,,,8.5\n"
	if rows, err := ParseControls("c.csv", []byte(speed)); err != nil || len(rows) != 1 || rows[0].HasPedals || !rows[0].HasSpeed || rows[0].SpeedMps != 8.5 {
		t.Errorf("commanded speed: %+v, %v; want one row with speed 8.5 and no pedals", rows, err)
	}
	tests := []struct{ name, data, has string }{
		{"no header", "", "no header"},
		{"missing column", "t_us,steer_rad\n", "t_arrival_us"},
		{"bad number", ControlsHeader + "\n10,100,abc,0,0\n", "c.csv:2"},
		{"throttle range", ControlsHeader + "\n10,100,0,1.5,0,\n", "throttle"},
		{"arrival order", ControlsHeader + "\n10,100,0,0,0,\n11,90,0,0,0,\n", "arrival order"},
		{"half pedals", ControlsHeader + "\n10,100,0,0.5,,3\n", "both given or both blank"},
		{"nothing longitudinal", ControlsHeader + "\n10,100,0,,,\n", "neither pedals"},
		{"NaN speed", ControlsHeader + "\n10,100,0,,,NaN\n", "speed_mps"},
		{"short row", ControlsHeader + "\n10,100\n", "no steer_rad"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseControls("c.csv", []byte(tc.data))
			if err == nil || !strings.Contains(err.Error(), tc.has) || !strings.Contains(err.Error(), "c.csv") {
				t.Errorf("got %v, want an error naming c.csv and %q", err, tc.has)
			}
		})
	}
}

// FuzzDecodeControl: an accepted message is in range and survives
// AppendJSON -> DecodeControl unchanged, and the CSV row written for it
// reads back unchanged.
func FuzzDecodeControl(f *testing.F) {
	f.Add([]byte(`{"t_us": 1712345678901234, "steer_rad": -0.021, "throttle": 0.3, "brake": 0}`))
	f.Add([]byte(`{"t_us": 1712345678901234, "operator": "alice", "steer_rad": -0.021, "throttle": 0.3, "brake": 0}`))
	f.Add([]byte(`{"t_us": 7, "operator": "b.o-b_2", "steer_rad": 0.1, "speed_mps": 8.5}`))
	f.Add([]byte(`{"t_us": 7, "operator": "a,b", "steer_rad": 0.1, "speed_mps": 8.5}`))
	f.Add([]byte(`{"t_us": 7, "operator": "alice", "steer_rad": NaN, "speed_mps": 8.5}`))
	f.Add([]byte(`{"t_us": 1, "steer_rad": 1.5707963267948966, "throttle": 1, "brake": 1}`))
	f.Add([]byte(`{"t_us": 1, "steer_rad": 1e-320, "throttle": 0, "brake": 0} `))
	f.Add([]byte(`{"t_us": -1, "steer_rad": 0, "throttle": 0, "brake": 0}`))
	f.Add([]byte(`{"t_us": 2, "steer_rad": 0, "throttle": 0, "brake": 0, "x": 1}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := DecodeControl(data)
		if err != nil {
			if !errors.Is(err, ErrBadControl) {
				t.Fatalf("error %v does not wrap ErrBadControl", err)
			}
			return
		}
		if c.TUs <= 0 || math.Abs(c.SteerRad) > MaxSteerRad || c.Throttle < 0 || c.Throttle > 1 || c.Brake < 0 || c.Brake > 1 {
			t.Fatalf("accepted out-of-range %+v", c)
		}
		again, err := DecodeControl(c.AppendJSON(nil))
		if err != nil || again != c {
			t.Fatalf("JSON round trip: %+v -> %+v, %v", c, again, err)
		}
		c.ArrivalUs = 42
		rows, err := ParseControls("c.csv", append([]byte(ControlsHeader+"\n"), c.appendRow(nil)...))
		if err != nil || len(rows) != 1 || rows[0] != c {
			t.Fatalf("CSV round trip: %+v -> %+v, %v", c, rows, err)
		}
	})
}

// FuzzParseControls: whatever ParseControls accepts is in range and in
// arrival order, and writing the rows again reads back the same rows.
func FuzzParseControls(f *testing.F) {
	f.Add([]byte(ControlsHeader + "\n10,100,0.1,0.2,0,,alice\n20,100,-0.1,,,9.5,bob\n"))
	f.Add([]byte(ControlsHeader + "\n10,100,NaN,0.2,0,,alice\n"))
	f.Add([]byte("t_us,t_arrival_us,steer_rad,throttle,brake\n10,100,0.1,0.2,0\n20,100,-0.1,0,1\n"))
	f.Add([]byte("brake,throttle,steer_rad,t_arrival_us,t_us,extra\n0,0,0,5,1,x\n"))
	f.Add([]byte(ControlsHeader + "\n10,100,0.1,0.2,0\n20,9"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, err := ParseControls("c.csv", data)
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || fe.Line < 1 {
				t.Fatalf("error %v is not a *FileError with a line", err)
			}
			return
		}
		out := []byte(ControlsHeader + "\n")
		for i, c := range rows {
			if c.check() != nil || (i > 0 && c.ArrivalUs < rows[i-1].ArrivalUs) {
				t.Fatalf("accepted bad row %d: %+v", i, c)
			}
			out = c.appendRow(out)
		}
		again, err := ParseControls("c.csv", out)
		if err != nil || len(again) != len(rows) {
			t.Fatalf("re-read: %v (%d rows, want %d)", err, len(again), len(rows))
		}
		for i := range rows {
			if again[i] != rows[i] {
				t.Fatalf("row %d: %+v != %+v", i, again[i], rows[i])
			}
		}
	})
}

func TestCreateControlsRefusesExisting(t *testing.T) {
	dir := t.TempDir()
	os.WriteFile(filepath.Join(dir, ControlsFile), nil, 0o644)
	if _, err := CreateControls(dir); err == nil {
		t.Error("an existing control log was overwritten")
	}
}

// TestControlsChannelRejectsAndCounts: a bad token, a NaN, a time that
// goes backwards and an operator without a profile are each rejected and
// counted; the good lines around them are accepted, recorded and handed to
// the sink.
func TestControlsChannelRejectsAndCounts(t *testing.T) {
	dir := t.TempDir()
	w, err := CreateControls(dir)
	if err != nil {
		t.Fatal(err)
	}
	var sunk []Control
	ch := &ControlsChannel{Token: testToken, Log: w, Now: func() time.Time { return time.UnixMicro(5_000_000) },
		Known: func(name string) bool { return name == "alice" || name == "bob" },
		Sink:  func(c Control) { sunk = append(sunk, c) }}
	post := func(token, body string) string {
		req := httptest.NewRequest("POST", "/api/controls", strings.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+token)
		req.Header.Set("Content-Type", "application/x-ndjson")
		rec := httptest.NewRecorder()
		ch.ServeHTTP(rec, req)
		return rec.Body.String()
	}
	post("not-the-token-000000", `{"t_us": 1, "operator": "alice", "steer_rad": 0, "speed_mps": 3}`)
	body := post(testToken, strings.Join([]string{
		`{"t_us": 10, "operator": "alice", "steer_rad": 0.1, "speed_mps": 3}`,
		`{"t_us": 20, "operator": "alice", "steer_rad": NaN, "speed_mps": 3}`,
		`{"t_us": 10, "operator": "alice", "steer_rad": 0.1, "speed_mps": 3}`,
		`{"t_us": 5, "operator": "alice", "steer_rad": 0.1, "speed_mps": 3}`,
		`{"t_us": 5, "operator": "bob", "steer_rad": 0.1, "speed_mps": 3}`,
		`{"t_us": 30, "operator": "mallory", "steer_rad": 0.1, "speed_mps": 3}`,
		`{"t_us": 30, "operator": "alice", "steer_rad": 0.2, "throttle": 0.1, "brake": 0}`,
	}, "\n"))
	if !strings.Contains(body, `"accepted":3`) || !strings.Contains(body, `"rejected":4`) {
		t.Errorf("reply %s; want 3 accepted, 4 rejected", body)
	}
	want := ControlCounts{Accepted: 3, BadToken: 1, Invalid: 1, UnknownOperator: 1, OutOfOrder: 2}
	if got := ch.Counts(); got != want {
		t.Errorf("counts %+v, want %+v", got, want)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	rows, err := ReadControls(filepath.Join(dir, ControlsFile))
	if err != nil || len(rows) != 3 || len(sunk) != 3 {
		t.Fatalf("recorded %+v (%v), sunk %d; want 3 each", rows, err, len(sunk))
	}
	for i, r := range rows {
		if r != sunk[i] || r.ArrivalUs != 5_000_000 {
			t.Errorf("row %d: recorded %+v, sunk %+v", i, r, sunk[i])
		}
	}
	if rows[1].Operator != "bob" || !rows[0].HasSpeed || rows[2].HasSpeed || !rows[2].HasPedals {
		t.Errorf("rows %+v", rows)
	}
}

// FuzzControlsChannel: any request body is answered, never fatal; every
// non-blank line is counted once, as accepted or rejected, and the reply
// agrees with the counts.
func FuzzControlsChannel(f *testing.F) {
	f.Add([]byte(`{"t_us": 10, "operator": "alice", "steer_rad": 0.1, "speed_mps": 3}` + "\n" + `{"t_us": 9, "operator": "alice", "steer_rad": 0.1, "speed_mps": 3}`))
	f.Add([]byte("\n\n{}\n{\"t_us\": 1e400}\n"))
	f.Add([]byte(`{"t_us": 10, "operator": "zed", "steer_rad": 0.1, "throttle": 0, "brake": 0}`))
	f.Fuzz(func(t *testing.T, body []byte) {
		ch := &ControlsChannel{Token: testToken, Known: func(name string) bool { return name != "zed" }}
		req := httptest.NewRequest("POST", "/api/controls", bytes.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+testToken)
		req.Header.Set("Content-Type", "application/json")
		rec := httptest.NewRecorder()
		ch.ServeHTTP(rec, req)
		if rec.Code == http.StatusRequestEntityTooLarge {
			return
		}
		var res struct{ Accepted, Rejected int }
		if err := json.Unmarshal(rec.Body.Bytes(), &res); err != nil {
			t.Fatalf("reply %q: %v", rec.Body.String(), err)
		}
		lines := 0
		for _, l := range bytes.Split(body, []byte{'\n'}) {
			if len(bytes.TrimSpace(l)) > 0 {
				lines++
			}
		}
		c := ch.Counts()
		if res.Accepted+res.Rejected != lines || uint64(res.Accepted) != c.Accepted || uint64(res.Rejected) != c.Rejected() {
			t.Fatalf("%d lines; reply %+v; counts %+v", lines, res, c)
		}
	})
}
