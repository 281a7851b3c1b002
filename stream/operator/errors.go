package operator

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Wrapped errors add context with %w; test
// with errors.Is.
var (
	// ErrUnknownProfile is returned for a profile name not in the store.
	ErrUnknownProfile = errors.New("operator: unknown profile")
	// ErrProfileExists is returned by Add for a name already in the store.
	ErrProfileExists = errors.New("operator: profile exists already")
	// ErrBadValue is wrapped by errors about a value no profile may hold
	// (cutoff outside [0, 1] or not a number, unknown label size, notes too
	// long, bad name).
	ErrBadValue = errors.New("operator: bad value")
	// ErrRefused is wrapped by *PolicyError: the administrator's policy
	// forbids the change.
	ErrRefused = errors.New("operator: refused by the administrator's policy")
	// ErrLockTimeout is returned when the store's lock could not be taken in
	// time (another writer holds it); try again.
	ErrLockTimeout = errors.New("operator: the profile store is locked by another writer; try again")
	// ErrNoProposal is returned by Apply when the profile has no proposal to
	// apply.
	ErrNoProposal = errors.New("operator: no proposal to apply")
	// ErrBadFile is wrapped by *FileError: a store or policy file that cannot
	// be read or parsed.
	ErrBadFile = errors.New("operator: unusable file")
)

// FileError reports a problem with the profile store or the policy file at
// Path; Line is 1-based, 0 when unknown. It unwraps to ErrBadFile and to the
// cause.
type FileError struct {
	Path string
	Line int
	Err  error
}

// Error names the file, the line and the cause.
func (e *FileError) Error() string {
	if e.Line > 0 {
		return fmt.Sprintf("%s:%d: %v", e.Path, e.Line, e.Err)
	}
	return fmt.Sprintf("%s: %v", e.Path, e.Err)
}

// Unwrap returns ErrBadFile and the cause.
func (e *FileError) Unwrap() []error { return []error{ErrBadFile, e.Err} }

// PolicyError is a refusal by the administrator's policy. It names the limit
// (a policy file key such as "min_cutoff" or "allow.console"), the value
// asked for, the bound and the policy file. It unwraps to ErrRefused.
type PolicyError struct {
	Limit string // the policy key that refuses, e.g. "max_cutoff"
	Asked string // what was asked, e.g. "0.2" or "cutoff"
	Bound string // the limit's value, e.g. "0.5" or "select, cutoff"
	File  string // the policy file; "" = the built-in defaults
}

// Error says what was refused, by which limit of which file, and what to do.
func (e *PolicyError) Error() string {
	src := "the built-in default policy (no policy file)"
	if e.File != "" {
		src = "the policy file " + e.File
	}
	return fmt.Sprintf("refused: %s is outside the administrator's limit %s = %s set in %s; stay within it or ask the administrator to change %s",
		e.Asked, e.Limit, e.Bound, src, e.Limit)
}

// Unwrap returns ErrRefused.
func (e *PolicyError) Unwrap() error { return ErrRefused }
