//go:build !unix

package operator

import (
	"errors"
	"time"
)

// lockFile is not implemented off Unix: the store needs flock(2).
func lockFile(path string, timeout time.Duration) (func(), error) {
	return nil, errors.New("operator: the profile store needs a Unix system (flock)")
}
