package opfit

import "errors"

// Errors returned by this package; wrapped errors add context with %w.
var (
	// ErrTooLittleData is returned when there is not enough data for a
	// measure; a fit with too little data recommends nothing and says why.
	ErrTooLittleData = errors.New("opfit: too little data")
	// ErrBadConfig is wrapped by errors about an unusable configuration.
	ErrBadConfig = errors.New("opfit: bad configuration")
	// ErrBadData is wrapped by errors about unusable input values.
	ErrBadData = errors.New("opfit: bad data")
)
