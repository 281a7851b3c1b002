package whip

import (
	"math"
	"sync"
	"time"
)

// rateLimiter is a token bucket per key (the remote IP address). Each bucket holds at most burst tokens and
// refills at ratePerS tokens per second; a request takes one token or is refused with the time until the
// next token. Buckets that are full are idle and are pruned once the map grows past maxKeys, so memory stays
// bounded under address-spoofing floods (refused keys simply get a fresh, full bucket later: the limit then
// protects less, but never grows memory without bound). Safe for concurrent use.
type rateLimiter struct {
	ratePerS float64
	burst    float64
	maxKeys  int

	mu      sync.Mutex
	buckets map[string]*bucket
}

type bucket struct {
	tokens float64
	last   time.Time
}

func newRateLimiter(ratePerS float64, burst int, maxKeys int) *rateLimiter {
	return &rateLimiter{ratePerS: ratePerS, burst: float64(burst), maxKeys: maxKeys, buckets: map[string]*bucket{}}
}

// allow takes a token for key at time now. If none is left it returns false and how long until one is.
func (l *rateLimiter) allow(key string, now time.Time) (ok bool, wait time.Duration) {
	l.mu.Lock()
	defer l.mu.Unlock()
	b := l.buckets[key]
	if b == nil {
		if len(l.buckets) >= l.maxKeys {
			l.prune(now)
		}
		b = &bucket{tokens: l.burst, last: now}
		l.buckets[key] = b
	}
	if dt := now.Sub(b.last).Seconds(); dt > 0 {
		b.tokens = math.Min(l.burst, b.tokens+dt*l.ratePerS)
		b.last = now
	}
	if b.tokens >= 1 {
		b.tokens--
		return true, 0
	}
	if l.ratePerS <= 0 {
		return false, time.Hour
	}
	return false, time.Duration((1 - b.tokens) / l.ratePerS * float64(time.Second))
}

// prune removes buckets that would be full by now (idle keys); if none are, it drops the whole map, which
// only makes the limiter more lenient for a moment.
func (l *rateLimiter) prune(now time.Time) {
	for k, b := range l.buckets {
		if b.tokens+now.Sub(b.last).Seconds()*l.ratePerS >= l.burst {
			delete(l.buckets, k)
		}
	}
	if len(l.buckets) >= l.maxKeys {
		clear(l.buckets)
	}
}
