package bench

import (
	"bytes"
	"errors"
	"math"
	"slices"
	"strings"
	"testing"
)

func TestShardDrives(t *testing.T) {
	for _, c := range []struct {
		s    Shard
		n    int
		want []int
	}{
		{Shard{}, 3, []int{0, 1, 2}},
		{Shard{0, 3}, 7, []int{0, 3, 6}},
		{Shard{2, 3}, 7, []int{2, 5}},
		{Shard{4, 5}, 3, nil},
	} {
		if got := c.s.Drives(c.n); !slices.Equal(got, c.want) {
			t.Errorf("%+v over %d drives: got %v, want %v", c.s, c.n, got, c.want)
		}
	}
	for _, s := range []Shard{{3, 3}, {-1, 2}, {1, 0}, {0, -1}} {
		if err := s.Validate(); !errors.Is(err, ErrShard) {
			t.Errorf("%+v: got %v, want ErrShard", s, err)
		}
	}
}

func TestReadDriveList(t *testing.T) {
	got, err := ReadDriveList(strings.NewReader("# night drives\n /data/a \n\n/data/b\r\n#/data/c\n"), "l.txt")
	if err != nil || !slices.Equal(got, []string{"/data/a", "/data/b"}) {
		t.Fatalf("got %q, %v", got, err)
	}
	for _, c := range []struct{ in, want string }{
		{"", "l.txt: no drives listed"},
		{"# only\n\n", "l.txt: no drives listed"},
		{"/a\n/b\n/a/\n", "l.txt:3: drive /a/ already listed on line 1"},
		{"/a\x00b\n", "l.txt:1: control character"},
	} {
		_, err := ReadDriveList(strings.NewReader(c.in), "l.txt")
		if err == nil || !strings.Contains(err.Error(), c.want) || !errors.Is(err, ErrReplayInput) {
			t.Errorf("%q: got %v, want an error with %q", c.in, err, c.want)
		}
	}
}

// FuzzReadDriveList: never panics; an accepted list written one per line
// reads back the same.
func FuzzReadDriveList(f *testing.F) {
	for _, s := range []string{"/a\n/b\n", "# c\n a \n", "", "/a\n/a\n", "x\x01\n", strings.Repeat("y", 70000)} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		got, err := ReadDriveList(strings.NewReader(s), "f")
		if err != nil {
			return
		}
		again, err := ReadDriveList(strings.NewReader(strings.Join(got, "\n")), "f")
		if err != nil || !slices.Equal(got, again) {
			t.Fatalf("%q read as %q, written back reads %q, %v", s, got, again, err)
		}
	})
}

// TestTicksCSVRoundTrip: rows written as ticks.csv read back to the same
// bits, NaN and infinity included.
func TestTicksCSVRoundTrip(t *testing.T) {
	live := NewTickRow(0, 1000, TickLive, 0)
	live.Confidence = 1
	pred := NewTickRow(3, 101000, TickPredicted, 100.00000000000001)
	pred.Confidence = 0.1 + 0.2
	pred.Hold = Scores{math.Inf(1), 1, 0}
	pred.Predicted = Scores{31.123456789012345, 0.987654321, 1.5e-7}
	pred.Warp = pred.Predicted
	pred.SynthMs, pred.SigmaPx, pred.MisalignMrad = 1.25, math.Pi, 1e-300
	rows := []TickRow{live, pred}
	var b bytes.Buffer
	if err := writeTicks(&b, rows); err != nil {
		t.Fatal(err)
	}
	got, err := ReadTicksCSV(&b, "ticks.csv")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 {
		t.Fatalf("got %d rows", len(got))
	}
	for i := range rows {
		var w, g bytes.Buffer
		writeTicks(&w, rows[i:i+1])
		writeTicks(&g, got[i:i+1])
		if w.String() != g.String() || math.Float64bits(got[i].Confidence) != math.Float64bits(rows[i].Confidence) && !math.IsNaN(rows[i].Confidence) {
			t.Errorf("row %d: wrote %q, read back %q", i, w.String(), g.String())
		}
	}
	if math.Float64bits(got[1].Predicted.PSNRdB) != math.Float64bits(pred.Predicted.PSNRdB) || !math.IsInf(got[1].Hold.PSNRdB, 1) || !math.IsNaN(got[1].Rotation.SSIM) {
		t.Errorf("values changed: %+v", got[1])
	}
	for _, c := range []struct{ in, want string }{
		{"", "ticks.csv: empty file"},
		{"tick,x\n", "ticks.csv:1"},
		{strings.Join(TicksCSVHeader(), ",") + "\n0,0,LIVE,0,x" + strings.Repeat(",", len(TicksCSVHeader())-5) + "\n", "ticks.csv:2 column confidence"},
		{strings.Join(TicksCSVHeader(), ",") + "\n0,0,GONE,0," + strings.Repeat(",", len(TicksCSVHeader())-5) + "\n", "state \"GONE\""},
	} {
		_, err := ReadTicksCSV(strings.NewReader(c.in), "ticks.csv")
		if err == nil || !strings.Contains(err.Error(), c.want) || !errors.Is(err, ErrTicksCSV) {
			t.Errorf("%q: got %v, want an error with %q", c.in, err, c.want)
		}
	}
}

// FuzzReadTicksCSV: never panics; accepted rows written again read back
// to the same text.
func FuzzReadTicksCSV(f *testing.F) {
	h := strings.Join(TicksCSVHeader(), ",") + "\n"
	f.Add(h)
	f.Add(h + "0,0,LIVE,0,1" + strings.Repeat(",", len(TicksCSVHeader())-5) + "\n")
	f.Add(h + "1,33,PREDICTED,33.3,0.5,20,0.9,3,21,0.91,2.5,inf,1,0,2,0.01,0.02,21,0.91,2.5,0.4,0.3,1.9,2.1,0.5,0.4,0.01,0.0125\n")
	f.Fuzz(func(t *testing.T, s string) {
		rows, err := ReadTicksCSV(strings.NewReader(s), "f")
		if err != nil {
			return
		}
		var a, b bytes.Buffer
		if err := writeTicks(&a, rows); err != nil {
			t.Fatal(err)
		}
		again, err := ReadTicksCSV(bytes.NewReader(a.Bytes()), "f")
		if err != nil {
			t.Fatalf("rewritten rows unreadable: %v", err)
		}
		writeTicks(&b, again)
		if a.String() != b.String() {
			t.Fatalf("round trip changed:\n%s\n%s", a.String(), b.String())
		}
	})
}
