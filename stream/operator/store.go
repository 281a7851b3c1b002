package operator

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"time"

	"stopgap/stream/console"
)

// FileFormat is the value of the "format" key of a profile store file. A
// file without the key (the console's older profiles file) is read as this
// format with empty histories.
const FileFormat = "stopgap-operators/1"

// MaxStoreBytes caps the size of a profile store file (about 16 profiles
// with a few thousand history entries each).
const MaxStoreBytes = 16 << 20

// DefaultLockTimeout is how long a writer waits for another writer's lock.
const DefaultLockTimeout = 5 * time.Second

// Snapshot is the whole content of a profile store at one moment.
type Snapshot struct {
	// Active names the profile in use by the console ("" when empty).
	Active string
	// Profiles sorted by name; at most console.MaxProfiles.
	Profiles []Profile
}

// Find returns the index of the named profile, or -1.
func (s *Snapshot) Find(name string) int {
	for i := range s.Profiles {
		if s.Profiles[i].Name == name {
			return i
		}
	}
	return -1
}

// storeFile is the JSON form of a Snapshot.
type storeFile struct {
	Format   string    `json:"format,omitempty"`
	Active   string    `json:"active"`
	Profiles []Profile `json:"profiles"`
}

// Store is a durable profile store: one JSON file replaced atomically on
// every change, plus a lock file beside it ("<file>.lock") that serialises
// writers, within a process and across processes (flock(2)).
//
// Why files and not an embedded database: the store is small (at most
// console.MaxProfiles profiles), is written a few times per session, and an
// administrator should be able to read and back it up with ordinary tools;
// an embedded key-value store would add a dependency and, since it locks its
// whole file while open, would keep the console and the command line from
// holding it open together anyway. Durability comes from the classic
// sequence: write a temporary file in the same directory, fsync it, rename it
// over the store (atomic on POSIX file systems), fsync the directory. A crash
// at any point leaves either the old or the new file, never a mix; a stray
// temporary file is ignored and removed by the next writer.
//
// Readers (Load) take no lock: rename is atomic, so they see a whole
// snapshot. Writers (Update) take the lock, re-read the file, apply their
// change to that fresh state and write it back, so concurrent writers never
// lose each other's updates.
//
// The zero value is not usable; create one with NewStore.
type Store struct {
	path        string
	lockTimeout time.Duration
	// beforeRename, when set (tests), runs after the temporary file is
	// written and synced, before it replaces the store; an error aborts.
	beforeRename func(tmp string) error
}

// NewStore returns the store kept in the file at path. Nothing is read or
// created until the first Load or Update.
func NewStore(path string) *Store {
	return &Store{path: path, lockTimeout: DefaultLockTimeout}
}

// Path returns the store file's path.
func (s *Store) Path() string { return s.path }

// Load reads the store. A missing file is an empty Snapshot (no error).
// Errors are *FileError naming the file and line.
func (s *Store) Load() (Snapshot, error) {
	data, err := readLimited(s.path, MaxStoreBytes)
	if errors.Is(err, fs.ErrNotExist) {
		return Snapshot{}, nil
	}
	if err != nil {
		return Snapshot{}, &FileError{Path: s.path, Err: err}
	}
	return ParseStore(s.path, data)
}

// ParseStore decodes and checks the content of a store file; path is only
// quoted in errors.
func ParseStore(path string, data []byte) (Snapshot, error) {
	var f storeFile
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&f); err != nil {
		return Snapshot{}, &FileError{Path: path, Line: lineOf(data, dec.InputOffset(), err),
			Err: fmt.Errorf("%v; restore the file from a backup or fix it by hand", err)}
	}
	if _, err := dec.Token(); err != io.EOF {
		return Snapshot{}, &FileError{Path: path, Line: lineOf(data, dec.InputOffset(), nil), Err: errors.New("extra data after the JSON object")}
	}
	if f.Format != "" && f.Format != FileFormat {
		return Snapshot{}, &FileError{Path: path, Line: keyLine(data, "format"), Err: fmt.Errorf("format %q; this version reads %q", f.Format, FileFormat)}
	}
	snap := Snapshot{Active: f.Active, Profiles: f.Profiles}
	if err := snap.validate(); err != nil {
		line := 0
		var pe *profileErr
		if errors.As(err, &pe) {
			line = keyLine(data, pe.name)
		}
		return Snapshot{}, &FileError{Path: path, Line: line, Err: err}
	}
	sortProfiles(snap.Profiles)
	return snap, nil
}

type profileErr struct {
	name string
	err  error
}

func (e *profileErr) Error() string { return e.err.Error() }
func (e *profileErr) Unwrap() error { return e.err }

// validate checks the whole snapshot.
func (s *Snapshot) validate() error {
	if len(s.Profiles) > console.MaxProfiles {
		return fmt.Errorf("%w: %d profiles, at most %d", ErrBadValue, len(s.Profiles), console.MaxProfiles)
	}
	seen := make(map[string]bool, len(s.Profiles))
	for i := range s.Profiles {
		p := &s.Profiles[i]
		if err := p.validate(); err != nil {
			return &profileErr{name: p.Name, err: err}
		}
		if seen[p.Name] {
			return &profileErr{name: p.Name, err: fmt.Errorf("%w: profile %q given twice", ErrBadValue, p.Name)}
		}
		seen[p.Name] = true
	}
	if s.Active != "" && !seen[s.Active] {
		return fmt.Errorf("%w: active profile %q is not in the store", ErrUnknownProfile, s.Active)
	}
	if s.Active == "" && len(s.Profiles) > 0 {
		return fmt.Errorf("%w: no active profile; set \"active\" to one of the profiles", ErrBadValue)
	}
	return nil
}

func sortProfiles(ps []Profile) {
	sort.Slice(ps, func(i, j int) bool { return ps[i].Name < ps[j].Name })
}

// Update applies fn to the newest state under the writers' lock and stores
// the result atomically. fn may change the snapshot in place; if it returns
// an error nothing is written and Update returns that error. On success
// Update returns the stored snapshot. It waits up to DefaultLockTimeout for
// another writer (ErrLockTimeout).
func (s *Store) Update(fn func(*Snapshot) error) (Snapshot, error) {
	unlock, err := lockFile(s.path+".lock", s.lockTimeout)
	if err != nil {
		return Snapshot{}, err
	}
	defer unlock()
	snap, err := s.Load()
	if err != nil {
		return Snapshot{}, err
	}
	if err := fn(&snap); err != nil {
		return Snapshot{}, err
	}
	sortProfiles(snap.Profiles)
	if err := snap.validate(); err != nil {
		return Snapshot{}, err
	}
	if err := s.write(snap); err != nil {
		return Snapshot{}, err
	}
	return snap, nil
}

// write replaces the store file atomically. The caller holds the lock.
func (s *Store) write(snap Snapshot) (err error) {
	data, err := json.MarshalIndent(storeFile{Format: FileFormat, Active: snap.Active, Profiles: snap.Profiles}, "", "  ")
	if err != nil {
		return &FileError{Path: s.path, Err: err}
	}
	data = append(data, '\n')
	dir := filepath.Dir(s.path)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("create the directory: %w", err)}
	}
	// Leftovers of a writer that crashed are ours to clean: we hold the lock.
	if old, _ := filepath.Glob(filepath.Join(dir, "."+filepath.Base(s.path)+".tmp-*")); len(old) > 0 {
		for _, o := range old {
			os.Remove(o)
		}
	}
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(s.path)+".tmp-*")
	if err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("create temporary file: %w", err)}
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	if _, err = tmp.Write(data); err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("write: %w", err)}
	}
	if err = tmp.Sync(); err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("sync: %w", err)}
	}
	if err = tmp.Close(); err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("close: %w", err)}
	}
	if s.beforeRename != nil {
		if err = s.beforeRename(tmp.Name()); err != nil {
			return err
		}
	}
	if err = os.Rename(tmp.Name(), s.path); err != nil {
		return &FileError{Path: s.path, Err: fmt.Errorf("rename: %w", err)}
	}
	if d, derr := os.Open(dir); derr == nil {
		d.Sync() // best effort: some file systems refuse fsync on directories
		d.Close()
	}
	return nil
}

func readLimited(path string, limit int64) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, limit+1))
	if err != nil {
		return nil, err
	}
	if int64(len(data)) > limit {
		return nil, fmt.Errorf("larger than %d bytes", limit)
	}
	return data, nil
}
