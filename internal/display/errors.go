package display

import "errors"

// Errors returned by this package; each is wrapped with the offending value.
var (
	// ErrInvalidPolicy reports a Policy whose cutoff is outside [0, 1] or
	// whose age cap is negative or not finite.
	ErrInvalidPolicy = errors.New("display: invalid policy")
	// ErrInvalidState reports a state name that is not one of State's.
	ErrInvalidState = errors.New("display: invalid state")
)
