package simdrive

import "errors"

// Errors returned by [Generate]. Test with errors.Is.
var (
	// ErrConfig reports an invalid [Config] value; the message names the field.
	ErrConfig = errors.New("simdrive: invalid config")
	// ErrExists reports that the output directory already exists; Generate
	// never overwrites.
	ErrExists = errors.New("simdrive: output directory already exists; remove it or choose another")
)
