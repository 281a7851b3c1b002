package bench

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// Files of a multi-drive run.
const (
	// ShardFile is the manifest a shard writes last into its output
	// directory (see ShardManifest).
	ShardFile = "shard.json"
	// DrivesReportFile is the aggregate of a multi-drive replay (see
	// DrivesReport).
	DrivesReportFile = "drives.json"
	// shardFormat is the version of ShardFile.
	shardFormat = 1
)

// Kinds of multi-drive run a shard can belong to.
const (
	KindReplay = "replay"
	KindTune   = "tune"
)

// ErrShard means shard outputs cannot be merged (missing, duplicate,
// from another drive list or other settings), or a shard selection is
// invalid; the wrapping error names the directory and what to do.
var ErrShard = errors.New("bench: shards do not make one run")

// Shard selects a deterministic share of a drive list: drive i (0-based,
// in the list's order) belongs to shard i mod Count. The zero value (Count
// 0) means the whole list in one process.
type Shard struct {
	Index, Count int
}

// Validate reports an index outside [0, Count) or a negative count.
func (s Shard) Validate() error {
	if s.Count < 0 || (s.Count == 0 && s.Index != 0) || (s.Count > 0 && (s.Index < 0 || s.Index >= s.Count)) {
		return fmt.Errorf("shard index %d of %d shards: want 0 <= index < count: %w", s.Index, s.Count, ErrShard)
	}
	return nil
}

// Drives returns the indices of the drives of a list of n that belong to
// this shard, ascending (all of them for the zero Shard).
func (s Shard) Drives(n int) []int {
	c := max(s.Count, 1)
	var out []int
	for i := s.Index; i < n; i += c {
		out = append(out, i)
	}
	return out
}

// DriveDir is the directory name of drive i's results inside a shard's or
// a multi-drive run's output.
func DriveDir(i int) string { return fmt.Sprintf("drive-%04d", i) }

// ShardManifest is shard.json: which run a shard belongs to and which
// drives it finished. It is written last, so a shard directory without it
// is not a finished shard.
type ShardManifest struct {
	Format int    `json:"format"`
	Kind   string `json:"kind"` // KindReplay or KindTune
	Index  int    `json:"shard_index"`
	Count  int    `json:"shard_count"`
	// Drives is the whole drive list, in order, as given to every shard.
	Drives []string `json:"drives"`
	// Settings are every setting that shapes the results, compared byte
	// for byte between shards.
	Settings json.RawMessage `json:"settings"`
	// Done lists the drives (indices into Drives) this shard replayed;
	// drive i's results are in DriveDir(i).
	Done []int `json:"drives_done"`
}

// replaySettings is the part of a ReplayConfig that shapes its results.
type replaySettings struct {
	ArrivalsFile    string                    `json:"arrivals_file"`
	PairToleranceMs float64                   `json:"pair_tolerance_ms"`
	Loss            lossmodel.Config          `json:"loss"`
	Policy          predictor.Policy          `json:"policy"`
	Filter          filter.Config             `json:"filter"`
	AllowanceMs     float64                   `json:"allowance_ms"`
	Telemetry       TelemetryLink             `json:"telemetry"`
	Confidence      predictor.ConfidenceModel `json:"confidence"`
	Examples        int                       `json:"examples"`
}

func settingsOf(c ReplayConfig) replaySettings {
	return replaySettings{c.ArrivalsFile, c.PairToleranceMs, c.Loss, c.Policy, c.Filter, c.AllowanceMs, c.Telemetry, c.Confidence, c.Examples}
}

// tuneSettings is everything that shapes a tuning result.
type tuneSettings struct {
	Drives       []replaySettings `json:"drives"`
	Cutoffs      []float64        `json:"cutoffs"`
	Tolerance    TuneTolerance    `json:"tolerance"`
	MinCutoff    float64          `json:"min_cutoff"`
	MaxCutoff    float64          `json:"max_cutoff"`
	Resamples    int              `json:"resamples"`
	Seed         uint64           `json:"seed"`
	MinGaps      int              `json:"min_gaps"`
	MinPredicted int              `json:"min_predicted"`
}

func driveNames(drives []ReplayConfig) ([]string, error) {
	if len(drives) == 0 {
		return nil, fmt.Errorf("no drives given; pass at least one recording: %w", ErrReplayInput)
	}
	names := make([]string, len(drives))
	seen := map[string]int{}
	for i, d := range drives {
		if d.Drive == "" {
			return nil, fmt.Errorf("drive %d has no directory: %w", i+1, ErrReplayInput)
		}
		if j, ok := seen[filepath.Clean(d.Drive)]; ok {
			return nil, fmt.Errorf("drive %s is listed twice (entries %d and %d); list each drive once: %w", d.Drive, j+1, i+1, ErrReplayInput)
		}
		seen[filepath.Clean(d.Drive)] = i
		names[i] = d.Drive
	}
	return names, nil
}

// DrivesConfig configures ReplayDrives.
type DrivesConfig struct {
	// Drives are the replays, in list order; Out and Overwrite of each
	// are ignored.
	Drives []ReplayConfig
	// Shard selects this process's share; the zero value replays every
	// drive and writes the aggregate report.
	Shard Shard
	// Out is the directory to create: the aggregate report (drives.json
	// and one report per drive) or, for a shard, its output (shard.json
	// and one report per drive of its share) for MergeShards.
	Out string
	// Overwrite allows replacing an existing non-empty Out.
	Overwrite bool
	// Started, if set, is called before each drive with its list index.
	Started func(i int, drive string)
}

// DriveResult is one drive of a DrivesReport.
type DriveResult struct {
	Index int    `json:"index"`
	Drive string `json:"drive"`
	// Dir is the drive's report directory, relative to the aggregate.
	Dir string `json:"dir"`
	// Summary is the drive's summary.json.
	Summary json.RawMessage `json:"summary"`
}

// DrivesReport is drives.json, the aggregate of a replay over many drives:
// each drive's summary and one summary pooled over the ticks of all drives
// in list order (the same Accumulator a single drive uses). In the pooled
// summary, LatencyMs, ArrivalsFile and Pairing are per drive and left
// empty; TelemetryRejected and TicksUnscored are sums.
type DrivesReport struct {
	Kind     string          `json:"kind"`
	Drives   []string        `json:"drives"`
	Settings json.RawMessage `json:"settings"`
	Results  []DriveResult   `json:"results"`
	Pooled   Summary         `json:"pooled"`
}

// ReplayDrives replays a list of drives (or a shard's share of it, see
// Shard) one after the other and writes each drive's report (as Replay
// does) into Out/DriveDir(i). Without a shard it then writes the
// aggregate (DrivesReportFile) and returns it; with one it writes
// ShardFile and returns a report of its share only (no pooled summary).
// Out appears only when everything in it is complete.
func ReplayDrives(ctx context.Context, cfg DrivesConfig) (DrivesReport, error) {
	names, err := driveNames(cfg.Drives)
	if err != nil {
		return DrivesReport{}, fmt.Errorf("replay: %w", err)
	}
	if err := cfg.Shard.Validate(); err != nil {
		return DrivesReport{}, fmt.Errorf("replay: %w", err)
	}
	if cfg.Out == "" {
		return DrivesReport{}, fmt.Errorf("replay: an output directory is needed: %w", ErrReplayInput)
	}
	if !cfg.Overwrite {
		if err := checkFreshOut(cfg.Out); err != nil {
			return DrivesReport{}, err
		}
	}
	settings := make([]replaySettings, len(cfg.Drives))
	for i, d := range cfg.Drives {
		settings[i] = settingsOf(d)
	}
	sj, err := json.Marshal(struct {
		Drives []replaySettings `json:"drives"`
	}{settings})
	if err != nil {
		return DrivesReport{}, fmt.Errorf("replay: settings: %w", err)
	}
	rep := DrivesReport{Kind: KindReplay, Drives: names, Settings: sj}
	only := cfg.Shard.Drives(len(names))
	if only == nil {
		only = []int{}
	}
	var sums []Summary
	var rows [][]TickRow
	err = writeDirAtomic(cfg.Out, cfg.Overwrite, "replay report", func(tmp string) error {
		for _, i := range only {
			if cfg.Started != nil {
				cfg.Started(i, names[i])
			}
			d := cfg.Drives[i]
			var out replayOutput
			sum, err := replayDrive(ctx, d, &out)
			if err == nil {
				err = ReportWriter{}.writeAllNew(filepath.Join(tmp, DriveDir(i)), sum, out.rows, out.examples)
			}
			for _, e := range out.examples {
				closeExample(e)
			}
			if err != nil {
				return fmt.Errorf("replay: drive %d of %d (%s): %w", i+1, len(names), names[i], err)
			}
			raw, err := json.Marshal(sum)
			if err != nil {
				return fmt.Errorf("replay: drive %s: summary: %w", names[i], err)
			}
			rep.Results = append(rep.Results, DriveResult{Index: i, Drive: names[i], Dir: DriveDir(i), Summary: raw})
			sums = append(sums, sum)
			rows = append(rows, out.rows)
		}
		if cfg.Shard.Count > 0 {
			return writeJSON(filepath.Join(tmp, ShardFile), ShardManifest{Format: shardFormat, Kind: KindReplay,
				Index: cfg.Shard.Index, Count: cfg.Shard.Count, Drives: names, Settings: sj, Done: only})
		}
		rep.Pooled = pooledSummary(sums, rows)
		return writeJSON(filepath.Join(tmp, DrivesReportFile), rep)
	})
	if err != nil {
		return DrivesReport{}, err
	}
	return rep, nil
}

// pooledSummary summarises the ticks of all drives, in order, with the
// settings of the first drive.
func pooledSummary(sums []Summary, rows [][]TickRow) Summary {
	var acc Accumulator
	var rejected, unscored int
	for d := range rows {
		for _, r := range rows[d] {
			acc.Add(r) // rows were validated when replayed or read back
		}
		rejected += sums[d].TelemetryRejected
		unscored += sums[d].TicksUnscored
	}
	s := acc.Summary()
	f := sums[0]
	s.Calibration, s.CalibrationTruth = acc.CalibrationAt(f.Calibration.ToleranceMrad)
	s.Drive = fmt.Sprintf("%d drives pooled", len(rows))
	s.Cutoff, s.MaxAgeMs, s.Loss, s.AllowanceMs, s.FilterModel, s.Telemetry = f.Cutoff, f.MaxAgeMs, f.Loss, f.AllowanceMs, f.FilterModel, f.Telemetry
	s.TelemetryRejected, s.TicksUnscored = rejected, unscored
	s.Motion = f.Motion
	return s
}

// writeAllNew creates dir and writes a report into it (see
// ReportWriter.Write; dir lies inside a directory being built).
func (w ReportWriter) writeAllNew(dir string, s Summary, ticks []TickRow, examples []Example) error {
	if err := os.Mkdir(dir, 0o755); err != nil {
		return fmt.Errorf("bench: %w", err)
	}
	return w.writeAll(dir, s, ticks, examples)
}

func writeJSON(path string, v any) error {
	return writeFile(path, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(v)
	})
}

// TuneShard replays the shard's share of cfg.Drives (see Tune) and writes
// into out, for MergeShards, ShardFile and each drive's ticks.csv in
// DriveDir(i): everything the sweep and its bootstrap need. out appears
// only when complete.
func TuneShard(ctx context.Context, cfg TuneConfig, shard Shard, out string, overwrite bool) (ShardManifest, error) {
	names, err := driveNames(cfg.Drives)
	if err != nil {
		return ShardManifest{}, fmt.Errorf("tune: %w", err)
	}
	if err := cfg.check(); err != nil {
		return ShardManifest{}, err
	}
	if shard.Count < 1 {
		return ShardManifest{}, fmt.Errorf("tune: a shard needs a shard count >= 1: %w", ErrShard)
	}
	if err := shard.Validate(); err != nil {
		return ShardManifest{}, fmt.Errorf("tune: %w", err)
	}
	if !overwrite {
		if err := checkFreshOut(out); err != nil {
			return ShardManifest{}, err
		}
	}
	ts := tuneSettings{Cutoffs: cfg.Cutoffs, Tolerance: cfg.Tolerance, MinCutoff: cfg.MinCutoff, MaxCutoff: cfg.MaxCutoff,
		Resamples: cfg.Resamples, Seed: cfg.Seed, MinGaps: cfg.MinGaps, MinPredicted: cfg.MinPredicted}
	for _, d := range cfg.Drives {
		ts.Drives = append(ts.Drives, settingsOf(d))
	}
	sj, err := json.Marshal(ts)
	if err != nil {
		return ShardManifest{}, fmt.Errorf("tune: settings: %w", err)
	}
	only := shard.Drives(len(names))
	if only == nil {
		only = []int{}
	}
	man := ShardManifest{Format: shardFormat, Kind: KindTune, Index: shard.Index, Count: shard.Count, Drives: names, Settings: sj, Done: only}
	rows, err := replayRows(ctx, cfg.Drives, only, cfg.Parallel, cfg.Progress)
	if err != nil {
		return ShardManifest{}, err
	}
	err = writeDirAtomic(out, overwrite, "tune shard", func(tmp string) error {
		for _, i := range only {
			dir := filepath.Join(tmp, DriveDir(i))
			if err := os.Mkdir(dir, 0o755); err != nil {
				return fmt.Errorf("bench: %w", err)
			}
			if err := writeTicksCSV(filepath.Join(dir, TicksFile), rows[i]); err != nil {
				return err
			}
		}
		return writeJSON(filepath.Join(tmp, ShardFile), man)
	})
	if err != nil {
		return ShardManifest{}, err
	}
	return man, nil
}

// Merged is the outcome of MergeShards: Replay for replay shards, Tune for
// tune shards.
type Merged struct {
	Kind   string
	Replay DrivesReport
	Tune   TuneResult
}

// MergeShards checks that dirs are the outputs of every shard of one run
// (one kind, one drive list, the same settings, each index 0..count-1
// exactly once) and writes into out the report a single process would have
// written over the whole list: for replay shards drives.json with one
// report per drive (copied from the shards), for tune shards the tuning
// report (WriteTuneReport). out appears only when complete; nothing is
// written when a check fails.
func MergeShards(dirs []string, out string, overwrite bool) (Merged, error) {
	if len(dirs) == 0 {
		return Merged{}, fmt.Errorf("merge: no shard directories given: %w", ErrShard)
	}
	mans := make([]ShardManifest, len(dirs))
	for k, d := range dirs {
		m, err := readManifest(d)
		if err != nil {
			return Merged{}, err
		}
		mans[k] = m
	}
	first := mans[0]
	byIndex := make([]int, first.Count)
	for i := range byIndex {
		byIndex[i] = -1
	}
	for k, m := range mans {
		switch {
		case m.Kind != first.Kind:
			return Merged{}, fmt.Errorf("merge: shard %s is a %s shard but %s is a %s shard; merge shards of one run only: %w", dirs[k], m.Kind, dirs[0], first.Kind, ErrShard)
		case m.Count != first.Count:
			return Merged{}, fmt.Errorf("merge: shard %s is one of %d shards but %s is one of %d; merge shards of one run only: %w", dirs[k], m.Count, dirs[0], first.Count, ErrShard)
		case !equalStrings(m.Drives, first.Drives):
			return Merged{}, fmt.Errorf("merge: shard %s was run over another drive list than %s (%s); rerun it with the same drives in the same order: %w",
				dirs[k], dirs[0], listDiff(first.Drives, m.Drives), ErrShard)
		case !bytes.Equal(m.Settings, first.Settings):
			return Merged{}, fmt.Errorf("merge: shard %s was run with other settings than %s (%s); rerun it with the same flags: %w",
				dirs[k], dirs[0], settingsDiff(first.Settings, m.Settings), ErrShard)
		}
		if j := byIndex[m.Index]; j >= 0 {
			return Merged{}, fmt.Errorf("merge: %s and %s are both shard %d of %d; pass each shard once: %w", dirs[j], dirs[k], m.Index, m.Count, ErrShard)
		}
		byIndex[m.Index] = k
		want := Shard{m.Index, m.Count}.Drives(len(m.Drives))
		if !equalInts(m.Done, want) {
			return Merged{}, fmt.Errorf("merge: shard %s (%d of %d) lists drives %v, want %v; its shard.json is damaged, rerun the shard: %w", dirs[k], m.Index, m.Count, m.Done, want, ErrShard)
		}
	}
	var missing []string
	for i, k := range byIndex {
		if k < 0 {
			missing = append(missing, fmt.Sprint(i))
		}
	}
	if len(missing) > 0 {
		return Merged{}, fmt.Errorf("merge: shard(s) %s of %d missing; run them (--shard-index) and pass their output too: %w", strings.Join(missing, ", "), first.Count, ErrShard)
	}
	// owner[i] is the directory holding drive i.
	owner := make([]string, len(first.Drives))
	for i := range owner {
		owner[i] = filepath.Join(dirs[byIndex[i%first.Count]], DriveDir(i))
	}
	rows := make([][]TickRow, len(owner))
	for i, d := range owner {
		r, err := readTicksFile(filepath.Join(d, TicksFile))
		if err != nil {
			return Merged{}, fmt.Errorf("merge: drive %d (%s): %w", i+1, first.Drives[i], err)
		}
		rows[i] = r
	}
	switch first.Kind {
	case KindReplay:
		return mergeReplay(first, owner, rows, out, overwrite)
	case KindTune:
		return mergeTune(first, rows, out, overwrite)
	}
	return Merged{}, fmt.Errorf("merge: %s: unknown kind %q: %w", dirs[0], first.Kind, ErrShard)
}

func mergeReplay(m ShardManifest, owner []string, rows [][]TickRow, out string, overwrite bool) (Merged, error) {
	rep := DrivesReport{Kind: KindReplay, Drives: m.Drives, Settings: m.Settings}
	sums := make([]Summary, len(owner))
	for i, d := range owner {
		raw, err := os.ReadFile(filepath.Join(d, SummaryFile))
		if err != nil {
			return Merged{}, fmt.Errorf("merge: drive %d (%s): %w; rerun its shard", i+1, m.Drives[i], err)
		}
		if err := json.Unmarshal(raw, &sums[i]); err != nil {
			return Merged{}, fmt.Errorf("merge: %s: %w; rerun its shard", filepath.Join(d, SummaryFile), err)
		}
		rep.Results = append(rep.Results, DriveResult{Index: i, Drive: m.Drives[i], Dir: DriveDir(i), Summary: raw})
	}
	rep.Pooled = pooledSummary(sums, rows)
	err := writeDirAtomic(out, overwrite, "replay report", func(tmp string) error {
		for i, d := range owner {
			if err := copyTree(d, filepath.Join(tmp, DriveDir(i))); err != nil {
				return fmt.Errorf("merge: drive %d (%s): %w", i+1, m.Drives[i], err)
			}
		}
		return writeJSON(filepath.Join(tmp, DrivesReportFile), rep)
	})
	if err != nil {
		return Merged{}, err
	}
	return Merged{Kind: KindReplay, Replay: rep}, nil
}

func mergeTune(m ShardManifest, rows [][]TickRow, out string, overwrite bool) (Merged, error) {
	var ts tuneSettings
	dec := json.NewDecoder(bytes.NewReader(m.Settings))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&ts); err != nil || len(ts.Drives) != len(m.Drives) {
		return Merged{}, fmt.Errorf("merge: tune settings unreadable (%v); rerun the shards with this version: %w", err, ErrShard)
	}
	cfg := TuneConfig{Cutoffs: ts.Cutoffs, Tolerance: ts.Tolerance, MinCutoff: ts.MinCutoff, MaxCutoff: ts.MaxCutoff,
		Resamples: ts.Resamples, Seed: ts.Seed, MinGaps: ts.MinGaps, MinPredicted: ts.MinPredicted}
	maxAge := make([]float64, len(ts.Drives))
	for i, d := range ts.Drives {
		maxAge[i] = d.Policy.MaxAgeMs
	}
	res, err := TuneTicks(rows, maxAge, cfg)
	if err != nil {
		return Merged{}, fmt.Errorf("merge: %w", err)
	}
	res.Drives = m.Drives
	if err := WriteTuneReport(out, res, overwrite); err != nil {
		return Merged{}, err
	}
	return Merged{Kind: KindTune, Tune: res}, nil
}

// readManifest reads and checks dir's shard.json.
func readManifest(dir string) (ShardManifest, error) {
	p := filepath.Join(dir, ShardFile)
	raw, err := os.ReadFile(p)
	if errors.Is(err, os.ErrNotExist) {
		return ShardManifest{}, fmt.Errorf("merge: %s has no %s: not a finished shard (did it fail, or is it still running?); rerun that shard: %w", dir, ShardFile, ErrShard)
	}
	if err != nil {
		return ShardManifest{}, fmt.Errorf("merge: %w", err)
	}
	var m ShardManifest
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&m); err != nil {
		return ShardManifest{}, fmt.Errorf("merge: %s: %w; rerun that shard: %w", p, err, ErrShard)
	}
	switch {
	case m.Format != shardFormat:
		return ShardManifest{}, fmt.Errorf("merge: %s has format %d, this version reads %d; rerun that shard with this version: %w", p, m.Format, shardFormat, ErrShard)
	case m.Count < 1 || m.Index < 0 || m.Index >= m.Count || len(m.Drives) == 0:
		return ShardManifest{}, fmt.Errorf("merge: %s: shard %d of %d over %d drives is not a shard; rerun that shard: %w", p, m.Index, m.Count, len(m.Drives), ErrShard)
	}
	return m, nil
}

func equalStrings(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func equalInts(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// listDiff names the first difference between two drive lists.
func listDiff(a, b []string) string {
	for i := range min(len(a), len(b)) {
		if a[i] != b[i] {
			return fmt.Sprintf("drive %d is %s there, %s here", i+1, a[i], b[i])
		}
	}
	return fmt.Sprintf("%d drives there, %d here", len(a), len(b))
}

// settingsDiff names the first top-level setting that differs.
func settingsDiff(a, b json.RawMessage) string {
	var ma, mb map[string]json.RawMessage
	if json.Unmarshal(a, &ma) != nil || json.Unmarshal(b, &mb) != nil {
		return "unreadable settings"
	}
	if da, ok := ma["drives"]; ok {
		var la, lb []map[string]json.RawMessage
		if json.Unmarshal(da, &la) == nil && json.Unmarshal(mb["drives"], &lb) == nil {
			for i := range min(len(la), len(lb)) {
				for k, v := range la[i] {
					if !bytes.Equal(v, lb[i][k]) {
						return fmt.Sprintf("drive %d %s: %s there, %s here", i+1, k, v, lb[i][k])
					}
				}
			}
		}
	}
	for k, v := range ma {
		if k != "drives" && !bytes.Equal(v, mb[k]) {
			return fmt.Sprintf("%s: %s there, %s here", k, v, mb[k])
		}
	}
	return "settings differ"
}

// copyTree copies the regular files and directories under src to dst,
// which must not exist.
func copyTree(src, dst string) error {
	return filepath.WalkDir(src, func(p string, d os.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, err := filepath.Rel(src, p)
		if err != nil {
			return err
		}
		to := filepath.Join(dst, rel)
		if d.IsDir() {
			return os.Mkdir(to, 0o755)
		}
		if !d.Type().IsRegular() {
			return fmt.Errorf("%s is not a regular file", p)
		}
		return copyFile(p, to)
	})
}

func copyFile(src, dst string) error {
	in, err := os.Open(src)
	if err != nil {
		return err
	}
	defer in.Close()
	out, err := os.OpenFile(dst, os.O_CREATE|os.O_EXCL|os.O_WRONLY, 0o644)
	if err != nil {
		return err
	}
	if _, err := io.Copy(out, in); err != nil {
		out.Close()
		return err
	}
	return out.Close()
}

// ReadDriveList reads a list of drive directories, one per line: leading
// and trailing blanks are trimmed, empty lines and lines starting with #
// are skipped. A directory listed twice, a line with a control character
// or an empty list is an error naming the line. name is used in errors.
func ReadDriveList(r io.Reader, name string) ([]string, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 4096), 64*1024)
	var out []string
	seen := map[string]int{}
	line := 0
	for sc.Scan() {
		line++
		s := strings.TrimSpace(sc.Text())
		if s == "" || strings.HasPrefix(s, "#") {
			continue
		}
		for _, c := range s {
			if c < 0x20 || c == 0x7f {
				return nil, fmt.Errorf("%s:%d: control character %U in a drive path; one directory per line: %w", name, line, c, ErrReplayInput)
			}
		}
		key := filepath.Clean(s)
		if l, ok := seen[key]; ok {
			return nil, fmt.Errorf("%s:%d: drive %s already listed on line %d; list each drive once: %w", name, line, s, l, ErrReplayInput)
		}
		seen[key] = line
		out = append(out, s)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s:%d: %w; one directory per line (at most 64 KiB): %w", name, line+1, err, ErrReplayInput)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: no drives listed; one recording directory per line: %w", name, ErrReplayInput)
	}
	return out, nil
}
