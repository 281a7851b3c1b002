package console

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
)

// ControlState is the operator control state returned by GET /api/state and
// POST /api/cutoff.
type ControlState struct {
	Profile  string    `json:"profile"`  // profile in use
	Cutoff   float64   `json:"cutoff"`   // its cutoff, in Limits
	Limits   Limits    `json:"limits"`   // administrator's limits
	Profiles []Profile `json:"profiles"` // all profiles, sorted by name
	Viewers  int       `json:"viewers"`  // connected viewers
}

// CutoffRequest is the body of POST /api/cutoff. At least one field must be
// set:
//   - Profile only: switch to that existing profile;
//   - Cutoff only: change the cutoff of the profile in use;
//   - both: set that profile's cutoff (creating it if new) and switch to it.
type CutoffRequest struct {
	Profile *string  `json:"profile,omitempty"`
	Cutoff  *float64 `json:"cutoff,omitempty"`
}

// parseCutoffRequest decodes one JSON object with only known fields.
func parseCutoffRequest(data []byte) (CutoffRequest, error) {
	var req CutoffRequest
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&req); err != nil {
		return CutoffRequest{}, fmt.Errorf("%w: body must be one JSON object {\"profile\": string, \"cutoff\": number}: %v", ErrBadRequest, err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return CutoffRequest{}, fmt.Errorf("%w: extra data after the JSON object", ErrBadRequest)
	}
	if req.Profile == nil && req.Cutoff == nil {
		return CutoffRequest{}, fmt.Errorf("%w: give \"profile\", \"cutoff\" or both", ErrBadRequest)
	}
	return req, nil
}

// CheckProfileName returns an error wrapping ErrBadProfileName unless name
// follows the profile name rules: 1 to MaxProfileNameLen bytes of letters,
// digits, space, '-', '_' or '.'. Other channels that name an operator use
// it too.
func CheckProfileName(name string) error { return validProfileName(name) }

// validProfileName checks the profile name rules (see ErrBadProfileName).
func validProfileName(name string) error {
	if name == "" || len(name) > MaxProfileNameLen {
		return fmt.Errorf("%w: %q must be 1 to %d bytes", ErrBadProfileName, name, MaxProfileNameLen)
	}
	for _, r := range name {
		ok := r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' ||
			r == ' ' || r == '-' || r == '_' || r == '.'
		if !ok {
			return fmt.Errorf("%w: %q; use letters, digits, space, '-', '_' or '.'", ErrBadProfileName, name)
		}
	}
	return nil
}

// ProfileStore is a durable home for the profiles that other processes may
// change too (Config.Store). The console keeps a copy for its lock-free
// per-tick reads and never writes that copy back: every change goes through
// Apply, which the store carries out against its own latest state, so
// changes made meanwhile by other writers are not lost.
type ProfileStore interface {
	// Load returns all profiles and the name of the active one.
	Load() (profiles []Profile, active string, err error)
	// Apply carries out req (see CutoffRequest) on the stored state and
	// returns the state after it. A refusal must leave the store unchanged
	// and return an error saying what to do.
	Apply(req CutoffRequest) (profiles []Profile, active string, err error)
}

// cutoffStore holds the profiles; all methods are safe for concurrent use.
type cutoffStore struct {
	mu       sync.Mutex
	limits   Limits
	source   string    // Config.LimitsSource
	profiles []Profile // sorted by name
	active   int       // index into profiles
	path     string    // profiles file, "" for none
	backend  ProfileStore
	loaded   []Profile // the backend's profiles as last adopted, unclamped
	loadedAt string    // and its active profile
	bits     atomic.Uint64
	nameVal  atomic.Pointer[string]
	onChange func(profile string, cutoff float64)
	log      *slog.Logger
}

// profilesFile is the on-disk form of Config.ProfilesPath.
type profilesFile struct {
	Active   string    `json:"active"`
	Profiles []Profile `json:"profiles"`
}

func newCutoffStore(c Config) (*cutoffStore, error) {
	s := &cutoffStore{limits: c.Limits, source: c.LimitsSource, path: c.ProfilesPath, backend: c.Store,
		onChange: c.OnCutoffChange, log: c.Logger}
	if err := s.limits.validate(); err != nil {
		return nil, err
	}
	profiles, active := c.Profiles, c.ActiveProfile
	fromFile := false
	switch {
	case s.backend != nil:
		s.path = ""
		p, a, err := s.backend.Load()
		if err != nil {
			return nil, err
		}
		profiles, active, fromFile = p, a, true
	case s.path != "":
		f, err := loadProfilesFile(s.path)
		switch {
		case errors.Is(err, fs.ErrNotExist):
		case err != nil:
			return nil, err
		default:
			profiles, active, fromFile = f.Profiles, f.Active, true
		}
	}
	if len(profiles) == 0 {
		profiles, active = []Profile{{Name: "default", Cutoff: s.limits.clamp(DefaultCutoff)}}, ""
	}
	adopt := s.adopt
	if s.backend != nil {
		adopt = func(p []Profile, a string, _ bool) error { return s.adoptStored(p, a) }
	}
	if err := adopt(profiles, active, fromFile); err != nil {
		return nil, err
	}
	return s, nil
}

// adopt checks profiles and makes them the current state. Cutoffs outside
// the limits are an error, or clamped with a warning when they come from a
// file or store (the limits may have been tightened since). Caller holds mu
// (or owns s exclusively).
func (s *cutoffStore) adopt(profiles []Profile, active string, fromFile bool) error {
	if len(profiles) > MaxProfiles {
		return fmt.Errorf("%w: %d profiles, at most %d", ErrBadConfig, len(profiles), MaxProfiles)
	}
	next := make([]Profile, 0, MaxProfiles)
	for _, p := range profiles {
		if err := validProfileName(p.Name); err != nil {
			return fmt.Errorf("%w: %w", ErrBadConfig, err)
		}
		for _, q := range next {
			if q.Name == p.Name {
				return fmt.Errorf("%w: profile %q given twice", ErrBadConfig, p.Name)
			}
		}
		if math.IsNaN(p.Cutoff) || !s.limits.Contains(p.Cutoff) {
			if !fromFile || math.IsNaN(p.Cutoff) {
				return fmt.Errorf("%w: profile %q: %w", ErrBadConfig, p.Name, s.limitError(p.Cutoff))
			}
			clamped := s.limits.clamp(p.Cutoff)
			s.log.Warn("console: profile cutoff outside the administrator's limits; clamped",
				"profile", p.Name, "cutoff", p.Cutoff, "clamped", clamped, "file", s.path, "limits", s.source)
			p.Cutoff = clamped
		}
		next = append(next, p)
	}
	sort.Slice(next, func(i, j int) bool { return next[i].Name < next[j].Name })
	if active == "" {
		active = profiles[0].Name
	}
	idx := -1
	for i, p := range next {
		if p.Name == active {
			idx = i
		}
	}
	if idx < 0 {
		return fmt.Errorf("%w: active profile %q: %w", ErrBadConfig, active, ErrUnknownProfile)
	}
	s.profiles, s.active = next, idx
	s.publish()
	return nil
}

// limitError returns the refusal of cutoff c.
func (s *cutoffStore) limitError(c float64) *LimitError {
	return &LimitError{Cutoff: c, Limits: s.limits, Source: s.source}
}

// reload re-reads the profiles from the backend (no-op without one), so
// changes made by other writers reach the per-tick Cutoff.
func (s *cutoffStore) reload() error {
	if s.backend == nil {
		return nil
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	p, a, err := s.backend.Load()
	if err != nil {
		return err
	}
	if len(p) == 0 {
		return nil // emptied by another writer: keep what we have
	}
	if a == s.loadedAt && slices.Equal(p, s.loaded) {
		return nil // unchanged: no work, no repeated clamp warnings
	}
	return s.adoptStored(p, a)
}

// adoptStored adopts profiles read from the backend and remembers them.
// Caller holds mu (or owns s exclusively).
func (s *cutoffStore) adoptStored(p []Profile, active string) error {
	if err := s.adopt(p, active, true); err != nil {
		return err
	}
	s.loaded, s.loadedAt = append(s.loaded[:0], p...), active
	return nil
}

// find returns the index of the named profile or -1. Caller holds mu (or
// owns s exclusively).
func (s *cutoffStore) find(name string) int {
	for i, p := range s.profiles {
		if p.Name == name {
			return i
		}
	}
	return -1
}

// publish makes the active profile visible to the lock-free getters.
func (s *cutoffStore) publish() {
	p := s.profiles[s.active]
	s.bits.Store(math.Float64bits(p.Cutoff))
	name := p.Name
	s.nameVal.Store(&name)
}

func (s *cutoffStore) cutoff() float64 { return math.Float64frombits(s.bits.Load()) }
func (s *cutoffStore) profile() string { return *s.nameVal.Load() }

// state returns a snapshot (viewers left 0 for the caller to fill).
func (s *cutoffStore) state() ControlState {
	s.mu.Lock()
	defer s.mu.Unlock()
	return ControlState{
		Profile:  s.profiles[s.active].Name,
		Cutoff:   s.profiles[s.active].Cutoff,
		Limits:   s.limits,
		Profiles: append([]Profile(nil), s.profiles...),
	}
}

// apply carries out req (see CutoffRequest). On error nothing changes. The
// profiles file, if any, is written before the change takes effect. The
// change callback runs after the lock is released; with concurrent requests
// callbacks may arrive out of order, Cutoff() is the authority.
func (s *cutoffStore) apply(req CutoffRequest) (ControlState, error) {
	st, err := s.applyLocked(req)
	if err == nil && s.onChange != nil {
		s.onChange(st.Profile, st.Cutoff)
	}
	return st, err
}

func (s *cutoffStore) applyLocked(req CutoffRequest) (ControlState, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.backend != nil {
		return s.applyBackend(req)
	}
	next := append(make([]Profile, 0, MaxProfiles), s.profiles...)
	active := s.active
	if req.Profile != nil {
		name := *req.Profile
		if err := validProfileName(name); err != nil {
			return ControlState{}, err
		}
		if active = s.find(name); active < 0 {
			if req.Cutoff == nil {
				names := make([]string, len(s.profiles))
				for i, p := range s.profiles {
					names[i] = p.Name
				}
				return ControlState{}, fmt.Errorf("%w %q; known profiles: %s (give a cutoff too to create it)",
					ErrUnknownProfile, name, strings.Join(names, ", "))
			}
			if len(next) >= MaxProfiles {
				return ControlState{}, fmt.Errorf("%w: at most %d; reuse an existing one", ErrTooManyProfiles, MaxProfiles)
			}
			next = append(next, Profile{Name: name})
			sort.Slice(next, func(i, j int) bool { return next[i].Name < next[j].Name })
			for i := range next {
				if next[i].Name == name {
					active = i
				}
			}
		}
	}
	if req.Cutoff != nil {
		c := *req.Cutoff
		if math.IsNaN(c) || math.IsInf(c, 0) || !s.limits.Contains(c) {
			return ControlState{}, s.limitError(c)
		}
		next[active].Cutoff = c
	}
	if s.path != "" {
		if err := writeProfilesFile(s.path, profilesFile{Active: next[active].Name, Profiles: next}); err != nil {
			return ControlState{}, err
		}
	}
	s.profiles, s.active = next, active
	s.publish()
	return ControlState{Profile: next[active].Name, Cutoff: next[active].Cutoff, Limits: s.limits,
		Profiles: append([]Profile(nil), next...)}, nil
}

// applyBackend checks req against the limits and the name rules, then has
// the backend apply it to the stored state and adopts the result. Caller
// holds mu.
func (s *cutoffStore) applyBackend(req CutoffRequest) (ControlState, error) {
	if req.Profile != nil {
		if err := validProfileName(*req.Profile); err != nil {
			return ControlState{}, err
		}
	}
	if req.Cutoff != nil {
		if c := *req.Cutoff; math.IsNaN(c) || math.IsInf(c, 0) || !s.limits.Contains(c) {
			return ControlState{}, s.limitError(c)
		}
	}
	profiles, active, err := s.backend.Apply(req)
	if err != nil {
		return ControlState{}, err
	}
	if err := s.adoptStored(profiles, active); err != nil {
		return ControlState{}, err
	}
	return ControlState{Profile: s.profiles[s.active].Name, Cutoff: s.profiles[s.active].Cutoff, Limits: s.limits,
		Profiles: append([]Profile(nil), s.profiles...)}, nil
}

// loadProfilesFile reads and strictly decodes a profiles file.
func loadProfilesFile(path string) (profilesFile, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return profilesFile{}, err
		}
		return profilesFile{}, &ProfilesFileError{Path: path, Err: err}
	}
	return parseProfilesFile(path, data)
}

// parseProfilesFile decodes data; errors carry path and line.
func parseProfilesFile(path string, data []byte) (profilesFile, error) {
	var f profilesFile
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&f); err != nil {
		return profilesFile{}, &ProfilesFileError{Path: path, Line: lineOf(data, dec.InputOffset(), err), Err: err}
	}
	if _, err := dec.Token(); err != io.EOF {
		return profilesFile{}, &ProfilesFileError{Path: path, Line: lineOf(data, dec.InputOffset(), nil),
			Err: errors.New("extra data after the JSON object")}
	}
	if len(f.Profiles) == 0 {
		return profilesFile{}, &ProfilesFileError{Path: path, Err: errors.New("no profiles")}
	}
	return f, nil
}

// lineOf returns the 1-based line of the error position: the syntax or type
// error offset when err has one, else off.
func lineOf(data []byte, off int64, err error) int {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		off = se.Offset
	case errors.As(err, &te):
		off = te.Offset
	}
	if off > int64(len(data)) {
		off = int64(len(data))
	}
	if off < 0 {
		off = 0
	}
	return 1 + bytes.Count(data[:off], []byte{'\n'})
}

// writeProfilesFile writes f to path atomically: a temporary file in the
// same directory, fsync, rename over path, fsync of the directory.
func writeProfilesFile(path string, f profilesFile) (err error) {
	data, err := json.MarshalIndent(f, "", "  ")
	if err != nil {
		return &ProfilesFileError{Path: path, Err: err}
	}
	data = append(data, '\n')
	dir := filepath.Dir(path)
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return &ProfilesFileError{Path: path, Err: fmt.Errorf("create temporary file: %w", err)}
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	if _, err = tmp.Write(data); err != nil {
		return &ProfilesFileError{Path: path, Err: fmt.Errorf("write: %w", err)}
	}
	if err = tmp.Sync(); err != nil {
		return &ProfilesFileError{Path: path, Err: fmt.Errorf("sync: %w", err)}
	}
	if err = tmp.Close(); err != nil {
		return &ProfilesFileError{Path: path, Err: fmt.Errorf("close: %w", err)}
	}
	if err = os.Rename(tmp.Name(), path); err != nil {
		return &ProfilesFileError{Path: path, Err: fmt.Errorf("rename: %w", err)}
	}
	if d, derr := os.Open(dir); derr == nil {
		d.Sync() // best effort: some file systems refuse fsync on directories
		d.Close()
	}
	return nil
}

// ValidProfileName returns nil if name is a valid profile name: 1 to
// MaxProfileNameLen bytes of letters, digits, space, '-', '_' or '.'; else
// an error wrapping ErrBadProfileName. Durable profile stores use the same
// rule.
func ValidProfileName(name string) error { return validProfileName(name) }
