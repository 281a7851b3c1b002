package console

import (
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"encoding/hex"
	"fmt"
	"net/http"
	"strings"
)

// NewToken returns a fresh bearer token: 32 bytes from crypto/rand,
// base64url without padding (43 characters).
func NewToken() (string, error) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", fmt.Errorf("console: make token: %w", err)
	}
	return base64.RawURLEncoding.EncodeToString(b[:]), nil
}

// newSessionID returns 128 bits from crypto/rand as 32 hex digits.
func newSessionID() (string, error) {
	var b [16]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", fmt.Errorf("console: make session id: %w", err)
	}
	return hex.EncodeToString(b[:]), nil
}

// tokenChecker compares bearer tokens in constant time. Both sides are hashed
// with SHA-256 first so that neither the content nor the length of the
// expected token leaks through timing.
type tokenChecker struct {
	sum [sha256.Size]byte
}

func newTokenChecker(token string) tokenChecker {
	return tokenChecker{sum: sha256.Sum256([]byte(token))}
}

// check reports whether r carries exactly one "Authorization: Bearer <token>"
// header with the right token. The scheme name is case-insensitive
// (RFC 9110 section 11.1).
func (c tokenChecker) check(r *http.Request) bool {
	vals := r.Header.Values("Authorization")
	if len(vals) != 1 {
		return false
	}
	scheme, tok, ok := strings.Cut(vals[0], " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return false
	}
	got := sha256.Sum256([]byte(strings.TrimLeft(tok, " ")))
	return subtle.ConstantTimeCompare(got[:], c.sum[:]) == 1
}
