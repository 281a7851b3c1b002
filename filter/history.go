package filter

// entry is one accepted sample and the posterior right after applying it.
type entry struct {
	s   Sample
	x   [StateDim]float64
	p   [StateDim * StateDim]float64
	nis float64 // normalised innovation squared of the update (0 for the initialising sample)
	m   int     // number of scalar measurements in the update (0 for the initialising sample)
}

// ring is a growable ring buffer of entries kept in canonical sample order
// (see sampleLess). Growing allocates; everything else reuses the buffer.
type ring struct {
	buf  []entry
	head int
	n    int
}

func (r *ring) len() int { return r.n }

func (r *ring) at(i int) *entry { return &r.buf[(r.head+i)%len(r.buf)] }

func (r *ring) last() *entry { return r.at(r.n - 1) }

func (r *ring) grow() {
	c := 2 * len(r.buf)
	if c < 64 {
		c = 64
	}
	nb := make([]entry, c)
	for i := range r.n {
		nb[i] = *r.at(i)
	}
	r.buf, r.head = nb, 0
}

// insert puts e at position i (0 ≤ i ≤ len), shifting later entries back.
func (r *ring) insert(i int, e *entry) {
	if r.n == len(r.buf) {
		r.grow()
	}
	r.n++
	for j := r.n - 1; j > i; j-- {
		*r.at(j) = *r.at(j - 1)
	}
	*r.at(i) = *e
}

// popFront removes the first entry and copies it into dst.
func (r *ring) popFront(dst *entry) {
	*dst = *r.at(0)
	r.head = (r.head + 1) % len(r.buf)
	r.n--
}

func (r *ring) clear() { r.head, r.n = 0, 0 }

// sampleLess is the canonical order of samples: by time, then by the
// values, so that samples with equal TimeUs are applied in an order that
// does not depend on their arrival order.
func sampleLess(a, b *Sample) bool {
	if a.TimeUs != b.TimeUs {
		return a.TimeUs < b.TimeUs
	}
	if a.SpeedMps != b.SpeedMps {
		return a.SpeedMps < b.SpeedMps
	}
	if a.YawRateRps != b.YawRateRps {
		return a.YawRateRps < b.YawRateRps
	}
	if a.HasAccel != b.HasAccel {
		return !a.HasAccel
	}
	if a.AccelMps2 != b.AccelMps2 {
		return a.AccelMps2 < b.AccelMps2
	}
	if a.HasSteer != b.HasSteer {
		return !a.HasSteer
	}
	if a.SteerRad != b.SteerRad {
		return a.SteerRad < b.SteerRad
	}
	if a.Source != b.Source {
		return a.Source < b.Source
	}
	if a.SpeedStdMps != b.SpeedStdMps {
		return a.SpeedStdMps < b.SpeedStdMps
	}
	return a.YawRateStdRps < b.YawRateStdRps
}

// sampleEqual reports whether a and b are the same measurement. Values are
// compared with ==, so -0 equals +0.
func sampleEqual(a, b *Sample) bool {
	return !sampleLess(a, b) && !sampleLess(b, a)
}
