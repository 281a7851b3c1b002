package filter

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Kalman is a discrete-time Kalman filter core: a Gaussian estimate with
// mean x (length n) and covariance P (n×n), changed in place by the
// predict and update equations. It serves a plain linear filter (Predict,
// Update) and an extended one (PredictNonlinear, UpdateNonlinear, where the
// caller evaluates f(x), h(x) and their Jacobians).
//
// Update uses the Joseph form P⁺ = (I−KH)P(I−KH)ᵀ + KRKᵀ and both steps
// re-symmetrise P, so P stays symmetric positive semi-definite in floating
// point; entries below 1e-200 in magnitude are set to zero so that no
// subnormal numbers build up. After its first use with a given measurement size, each method is
// allocation-free: Kalman owns all scratch buffers. Inputs are only read
// during the call. When a method returns an error, x and P are unchanged.
//
// A Kalman is not safe for concurrent use. The zero value is not usable;
// call NewKalman.
type Kalman struct {
	n     int
	x     *mat.VecDense
	p     *mat.Dense
	ft    *mat.Dense    // Fᵀ
	tmp   *mat.Dense    // n×n scratch
	xs    *mat.VecDense // n scratch
	saveX []float64
	saveP []float64
	work  []*kalmanWork // indexed by measurement size m
}

// kalmanWork is the scratch for updates with m measurements.
type kalmanWork struct {
	hx  *mat.VecDense // H·x for the linear update
	ht  *mat.Dense    // Hᵀ, n×m
	pht *mat.Dense    // P·Hᵀ, n×m
	s   *mat.Dense    // H·P·Hᵀ + R, m×m
	l   []float64     // Cholesky factor of S, row-major lower
	y   []float64     // innovation z − h(x)
	u   []float64     // solve scratch, m
	k   *mat.Dense    // gain, n×m
	kt  *mat.Dense    // Kᵀ, m×n
	a   *mat.Dense    // I − K·H, n×n
	at  *mat.Dense    // Aᵀ
	ap  *mat.Dense    // A·P
	kr  *mat.Dense    // K·R, n×m
}

// NewKalman returns a core for an n-dimensional state with x = 0 and P = 0.
func NewKalman(n int) (*Kalman, error) {
	if n < 1 || n > 64 {
		return nil, fmt.Errorf("%w: state size %d, want 1..64", ErrDimension, n)
	}
	return &Kalman{
		n:     n,
		x:     mat.NewVecDense(n, nil),
		p:     mat.NewDense(n, n, nil),
		ft:    mat.NewDense(n, n, nil),
		tmp:   mat.NewDense(n, n, nil),
		xs:    mat.NewVecDense(n, nil),
		saveX: make([]float64, n),
		saveP: make([]float64, n*n),
	}, nil
}

// Dim returns the state size n.
func (k *Kalman) Dim() int { return k.n }

// Set copies the mean x (length n) and the row-major covariance p (length
// n·n) into k. p must be symmetric; it is re-symmetrised as (p+pᵀ)/2.
func (k *Kalman) Set(x, p []float64) error {
	if len(x) != k.n || len(p) != k.n*k.n {
		return fmt.Errorf("%w: Set got len(x)=%d, len(p)=%d for n=%d", ErrDimension, len(x), len(p), k.n)
	}
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: Set got a non-finite mean", ErrNumeric)
		}
	}
	for _, v := range p {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: Set got a non-finite covariance", ErrNumeric)
		}
	}
	copy(k.x.RawVector().Data, x)
	copy(k.p.RawMatrix().Data, p)
	symmetrize(k.p)
	return nil
}

// Mean appends the mean to dst and returns the result (destination-first;
// pass dst[:0] to reuse a buffer without allocating).
func (k *Kalman) Mean(dst []float64) []float64 { return append(dst, k.x.RawVector().Data...) }

// Cov appends the row-major covariance to dst and returns the result.
func (k *Kalman) Cov(dst []float64) []float64 { return append(dst, k.p.RawMatrix().Data...) }

// Predict applies the linear prediction x = F·x, P = F·P·Fᵀ + Q.
func (k *Kalman) Predict(f, q mat.Matrix) error {
	if err := k.checkSquare("F", f); err != nil {
		return err
	}
	k.xs.MulVec(f, k.x)
	return k.predict(k.xs, f, q)
}

// PredictNonlinear applies the extended prediction x = fx, P = F·P·Fᵀ + Q,
// where the caller evaluated fx = f(x) and F = ∂f/∂x at the current mean.
func (k *Kalman) PredictNonlinear(fx mat.Vector, f, q mat.Matrix) error {
	if fx.Len() != k.n {
		return fmt.Errorf("%w: f(x) has length %d, want %d", ErrDimension, fx.Len(), k.n)
	}
	if err := k.checkSquare("F", f); err != nil {
		return err
	}
	return k.predict(fx, f, q)
}

func (k *Kalman) predict(fx mat.Vector, f, q mat.Matrix) error {
	if err := k.checkSquare("Q", q); err != nil {
		return err
	}
	k.save()
	for i := range k.n {
		k.x.SetVec(i, fx.AtVec(i))
	}
	transposeInto(k.ft, f)
	k.tmp.Mul(f, k.p)
	k.p.Mul(k.tmp, k.ft)
	k.p.Add(k.p, q)
	symmetrize(k.p)
	if !k.finite() {
		k.restore()
		return fmt.Errorf("%w: prediction produced a non-finite value", ErrNumeric)
	}
	return nil
}

// Update applies the linear measurement update with z = H·x + v,
// v ~ N(0, R). It returns the normalised innovation squared
// NIS = yᵀS⁻¹y with y = z − H·x and S = H·P·Hᵀ + R.
func (k *Kalman) Update(z mat.Vector, h, r mat.Matrix) (nis float64, err error) {
	m, err := k.checkMeas(z, h, r)
	if err != nil {
		return 0, err
	}
	w := k.workFor(m)
	w.hx.MulVec(h, k.x)
	return k.update(m, w, z, w.hx, h, r)
}

// UpdateNonlinear applies the extended update with z = h(x) + v,
// v ~ N(0, R), where the caller evaluated hx = h(x) and H = ∂h/∂x at the
// current (prior) mean. It returns the NIS like Update.
func (k *Kalman) UpdateNonlinear(z, hx mat.Vector, h, r mat.Matrix) (nis float64, err error) {
	m, err := k.checkMeas(z, h, r)
	if err != nil {
		return 0, err
	}
	if hx.Len() != m {
		return 0, fmt.Errorf("%w: h(x) has length %d, want %d", ErrDimension, hx.Len(), m)
	}
	return k.update(m, k.workFor(m), z, hx, h, r)
}

func (k *Kalman) update(m int, w *kalmanWork, z, hx mat.Vector, h, r mat.Matrix) (float64, error) {
	n := k.n
	transposeInto(w.ht, h)
	w.pht.Mul(k.p, w.ht)
	w.s.Mul(h, w.pht)
	w.s.Add(w.s, r)
	symmetrize(w.s)
	if !cholesky(w.l, w.s.RawMatrix().Data, m) {
		return 0, fmt.Errorf("%w: innovation covariance not positive definite", ErrNumeric)
	}
	for i := range m {
		w.y[i] = z.AtVec(i) - hx.AtVec(i)
	}
	// NIS = yᵀ S⁻¹ y.
	copy(w.u, w.y)
	cholSolve(w.l, w.u, m)
	nis := 0.0
	for i := range m {
		nis += w.y[i] * w.u[i]
	}
	// K = P Hᵀ S⁻¹, row by row: S k_iᵀ = (P Hᵀ)_iᵀ since S is symmetric.
	kd := w.k.RawMatrix()
	phd := w.pht.RawMatrix()
	for i := range n {
		row := kd.Data[i*kd.Stride : i*kd.Stride+m]
		copy(row, phd.Data[i*phd.Stride:i*phd.Stride+m])
		cholSolve(w.l, row, m)
	}
	k.save()
	for i := range n {
		dx := 0.0
		for j := range m {
			dx += w.k.At(i, j) * w.y[j]
		}
		k.x.SetVec(i, k.x.AtVec(i)+dx)
	}
	// Joseph form.
	w.a.Mul(w.k, h)
	ad := w.a.RawMatrix()
	for i := range n {
		for j := range n {
			v := -ad.Data[i*ad.Stride+j]
			if i == j {
				v++
			}
			ad.Data[i*ad.Stride+j] = v
		}
	}
	transposeInto(w.at, w.a)
	w.ap.Mul(w.a, k.p)
	k.p.Mul(w.ap, w.at)
	w.kr.Mul(w.k, r)
	transposeInto(w.kt, w.k)
	k.tmp.Mul(w.kr, w.kt)
	k.p.Add(k.p, k.tmp)
	symmetrize(k.p)
	if !k.finite() || math.IsNaN(nis) || math.IsInf(nis, 0) {
		k.restore()
		return 0, fmt.Errorf("%w: update produced a non-finite value", ErrNumeric)
	}
	return nis, nil
}

func (k *Kalman) workFor(m int) *kalmanWork {
	for len(k.work) <= m {
		k.work = append(k.work, nil)
	}
	if w := k.work[m]; w != nil {
		return w
	}
	n := k.n
	w := &kalmanWork{
		hx:  mat.NewVecDense(m, nil),
		ht:  mat.NewDense(n, m, nil),
		pht: mat.NewDense(n, m, nil),
		s:   mat.NewDense(m, m, nil),
		l:   make([]float64, m*m),
		y:   make([]float64, m),
		u:   make([]float64, m),
		k:   mat.NewDense(n, m, nil),
		kt:  mat.NewDense(m, n, nil),
		a:   mat.NewDense(n, n, nil),
		at:  mat.NewDense(n, n, nil),
		ap:  mat.NewDense(n, n, nil),
		kr:  mat.NewDense(n, m, nil),
	}
	k.work[m] = w
	return w
}

func (k *Kalman) checkSquare(name string, a mat.Matrix) error {
	if r, c := a.Dims(); r != k.n || c != k.n {
		return fmt.Errorf("%w: %s is %d×%d, want %d×%d", ErrDimension, name, r, c, k.n, k.n)
	}
	return nil
}

func (k *Kalman) checkMeas(z mat.Vector, h, r mat.Matrix) (int, error) {
	m := z.Len()
	if m < 1 || m > 64 {
		return 0, fmt.Errorf("%w: %d measurements, want 1..64", ErrDimension, m)
	}
	if hr, hc := h.Dims(); hr != m || hc != k.n {
		return 0, fmt.Errorf("%w: H is %d×%d, want %d×%d", ErrDimension, hr, hc, m, k.n)
	}
	if rr, rc := r.Dims(); rr != m || rc != m {
		return 0, fmt.Errorf("%w: R is %d×%d, want %d×%d", ErrDimension, rr, rc, m, m)
	}
	return m, nil
}

func (k *Kalman) save() {
	copy(k.saveX, k.x.RawVector().Data)
	copy(k.saveP, k.p.RawMatrix().Data)
}

func (k *Kalman) restore() {
	copy(k.x.RawVector().Data, k.saveX)
	copy(k.p.RawMatrix().Data, k.saveP)
}

func (k *Kalman) finite() bool {
	for _, v := range k.x.RawVector().Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	for _, v := range k.p.RawMatrix().Data {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return true
}

// transposeInto writes aᵀ into dst without allocating.
func transposeInto(dst *mat.Dense, a mat.Matrix) {
	r, c := a.Dims()
	dd := dst.RawMatrix()
	if ad, ok := a.(*mat.Dense); ok {
		raw := ad.RawMatrix()
		for i := range r {
			for j := range c {
				dd.Data[j*dd.Stride+i] = raw.Data[i*raw.Stride+j]
			}
		}
		return
	}
	for i := range r {
		for j := range c {
			dd.Data[j*dd.Stride+i] = a.At(i, j)
		}
	}
}

// flushBelow is the magnitude under which covariance entries are set to
// zero. Such values carry no information, and subnormal numbers make
// arithmetic slow and trip some LAPACK routines (gonum v0.17.0 EigenSym
// panics on a 3×3 matrix with subnormal entries).
const flushBelow = 1e-200

// symmetrize replaces the square matrix a by (a + aᵀ)/2 and sets entries
// smaller than flushBelow in magnitude to zero.
func symmetrize(a *mat.Dense) {
	raw := a.RawMatrix()
	for i := 0; i < raw.Rows; i++ {
		if v := raw.Data[i*raw.Stride+i]; math.Abs(v) < flushBelow {
			raw.Data[i*raw.Stride+i] = 0
		}
		for j := i + 1; j < raw.Cols; j++ {
			v := 0.5 * (raw.Data[i*raw.Stride+j] + raw.Data[j*raw.Stride+i])
			if math.Abs(v) < flushBelow {
				v = 0
			}
			raw.Data[i*raw.Stride+j] = v
			raw.Data[j*raw.Stride+i] = v
		}
	}
}

// cholesky writes the lower Cholesky factor of the symmetric m×m row-major
// matrix s into l. It reports false if s is not positive definite.
func cholesky(l, s []float64, m int) bool {
	clear(l)
	for j := range m {
		d := s[j*m+j]
		for k := range j {
			d -= l[j*m+k] * l[j*m+k]
		}
		if !(d > 0) || math.IsInf(d, 0) {
			return false
		}
		d = math.Sqrt(d)
		l[j*m+j] = d
		for i := j + 1; i < m; i++ {
			v := s[i*m+j]
			for k := range j {
				v -= l[i*m+k] * l[j*m+k]
			}
			l[i*m+j] = v / d
		}
	}
	return true
}

// cholSolve solves (L Lᵀ) u = b in place (b holds u on return).
func cholSolve(l, b []float64, m int) {
	for i := range m {
		v := b[i]
		for k := range i {
			v -= l[i*m+k] * b[k]
		}
		b[i] = v / l[i*m+i]
	}
	for i := m - 1; i >= 0; i-- {
		v := b[i]
		for k := i + 1; k < m; k++ {
			v -= l[k*m+i] * b[k]
		}
		b[i] = v / l[i*m+i]
	}
}
