package filter

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Rejections from [Filter.Add] are
// [*RejectError] values that unwrap to ErrNotFinite, ErrOutOfRange,
// ErrTooOld or ErrDuplicate; test for them with errors.Is.
var (
	// ErrNotFinite: a sample field is NaN or ±Inf. Fix the telemetry source
	// or decoder; the sample was dropped and the filter state is unchanged.
	ErrNotFinite = errors.New("filter: sample has a NaN or infinite value")

	// ErrOutOfRange: a sample value is outside the physical limits
	// (MaxSpeedMps, MaxYawRateRps, MaxAccelMps2, MaxSteerRad). Usually a
	// unit or scaling mistake upstream (deg vs rad, km/h vs m/s).
	ErrOutOfRange = errors.New("filter: sample value outside physical limits")

	// ErrTooOld: the sample (or the requested time) is older than the
	// history the filter keeps. Raise Config.HistoryUs or fix the ordering
	// or clock upstream.
	ErrTooOld = errors.New("filter: time older than the kept history")

	// ErrDuplicate: a sample identical in every field to one already in the
	// history was added again (for example a retransmission). Dropping it
	// keeps the filter from counting the same measurement twice.
	ErrDuplicate = errors.New("filter: duplicate sample")

	// ErrOutOfOrder: an operator command (AddCommand) is not newer than
	// the previous one. Commands come from one station in send order; an
	// older one is a replay or a clock step. Dropped and counted.
	ErrOutOfOrder = errors.New("filter: command not newer than the previous one")

	// ErrNoData: no sample has been accepted yet (or since Reset).
	ErrNoData = errors.New("filter: no sample accepted yet")

	// ErrTimeOrder: Relative was asked for an interval whose end is before
	// its start.
	ErrTimeOrder = errors.New("filter: interval end before its start")

	// ErrHorizon: the requested time is more than Config.MaxGapUs after the
	// newest accepted sample; the estimate would be meaningless.
	ErrHorizon = errors.New("filter: requested time too far beyond the newest sample")

	// ErrConfig: the Config passed to New is invalid.
	ErrConfig = errors.New("filter: invalid configuration")

	// ErrUnknownModel: ParseModel was given a name it does not know.
	ErrUnknownModel = errors.New("filter: unknown motion model")

	// ErrDimension: matrices or vectors passed to the Kalman core do not
	// have matching dimensions.
	ErrDimension = errors.New("filter: matrix or vector dimensions do not match")

	// ErrNumeric: a Kalman step produced a non-finite result or an
	// innovation covariance that is not positive definite. The core leaves
	// its state unchanged when it returns this.
	ErrNumeric = errors.New("filter: numerical failure in Kalman step")
)

// Reason says why Filter.Add rejected a sample. The zero value is invalid.
type Reason int

// Rejection reasons.
const (
	ReasonInvalid    Reason = iota // zero value; never used for a rejection
	ReasonNotFinite                // a field is NaN or ±Inf (ErrNotFinite)
	ReasonOutOfRange               // a value exceeds the physical limits (ErrOutOfRange)
	ReasonTooOld                   // older than the kept history (ErrTooOld)
	ReasonDuplicate                // identical to a sample already kept (ErrDuplicate)
	ReasonOutOfOrder               // a command not newer than the previous one (ErrOutOfOrder)
	numReasons
)

// String returns a short lower-case name such as "not_finite".
func (r Reason) String() string {
	switch r {
	case ReasonNotFinite:
		return "not_finite"
	case ReasonOutOfRange:
		return "out_of_range"
	case ReasonTooOld:
		return "too_old"
	case ReasonDuplicate:
		return "duplicate"
	case ReasonOutOfOrder:
		return "out_of_order"
	}
	return fmt.Sprintf("invalid_reason(%d)", int(r))
}

// Err returns the Err* value a rejection with this reason unwraps to, or
// nil for ReasonInvalid and unknown values.
func (r Reason) Err() error {
	switch r {
	case ReasonNotFinite:
		return ErrNotFinite
	case ReasonOutOfRange:
		return ErrOutOfRange
	case ReasonTooOld:
		return ErrTooOld
	case ReasonDuplicate:
		return ErrDuplicate
	case ReasonOutOfOrder:
		return ErrOutOfOrder
	}
	return nil
}

// RejectError reports a sample that Filter.Add dropped. The filter state is
// unchanged by a rejected sample. It unwraps to Reason.Err().
type RejectError struct {
	Reason Reason
	Sample Sample
	// Detail names the offending field and value and says what to check.
	Detail string
	// Command is true for a rejection by AddCommand; Sample then holds only
	// the command's TimeUs.
	Command bool
}

// Error implements error.
func (e *RejectError) Error() string {
	if e.Command {
		return fmt.Sprintf("filter: command at t_us=%d rejected (%s): %s", e.Sample.TimeUs, e.Reason, e.Detail)
	}
	return fmt.Sprintf("filter: sample at t_us=%d rejected (%s): %s", e.Sample.TimeUs, e.Reason, e.Detail)
}

// Unwrap returns the Err* value for e.Reason.
func (e *RejectError) Unwrap() error { return e.Reason.Err() }

// Counts holds the number of samples rejected by Filter.Add (or commands
// rejected by Filter.AddCommand), per reason.
type Counts struct {
	NotFinite  uint64
	OutOfRange uint64
	TooOld     uint64
	Duplicate  uint64
	OutOfOrder uint64 // commands only
}

// Total returns the number of rejections over all reasons.
func (c Counts) Total() uint64 {
	return c.NotFinite + c.OutOfRange + c.TooOld + c.Duplicate + c.OutOfOrder
}

// Of returns the count for one reason (0 for ReasonInvalid and unknown values).
func (c Counts) Of(r Reason) uint64 {
	switch r {
	case ReasonNotFinite:
		return c.NotFinite
	case ReasonOutOfRange:
		return c.OutOfRange
	case ReasonTooOld:
		return c.TooOld
	case ReasonDuplicate:
		return c.Duplicate
	case ReasonOutOfOrder:
		return c.OutOfOrder
	}
	return 0
}
