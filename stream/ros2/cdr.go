package ros2

import (
	"encoding/binary"
	"fmt"
	"math"
)

// Encapsulation identifiers of plain CDR (OMG DDS-RTPS 2.x, table 10.3).
const (
	// EncapsulationCDRBE is big-endian plain CDR.
	EncapsulationCDRBE uint16 = 0x0000
	// EncapsulationCDRLE is little-endian plain CDR, what ROS 2 writes on
	// x86 and ARM.
	EncapsulationCDRLE uint16 = 0x0001
)

// encapsulationLen is the length of the encapsulation header: the 2-byte
// representation identifier (always big-endian) and 2 bytes of options.
const encapsulationLen = 4

// cdrDecoder reads one CDR payload. Errors are sticky: after the first one
// every read returns a zero value and Err reports the first error. The
// decoder does not copy: byte sequences it returns alias the payload.
type cdrDecoder struct {
	buf   []byte // the whole payload, header included
	off   int    // next byte to read, counting the header
	order binary.ByteOrder
	err   error
}

// newCDRDecoder checks the encapsulation header of payload.
func newCDRDecoder(payload []byte) *cdrDecoder {
	d := &cdrDecoder{buf: payload}
	if len(payload) < encapsulationLen {
		d.fail("encapsulation", fmt.Sprintf("payload is %d bytes, shorter than the 4-byte encapsulation header", len(payload)))
		return d
	}
	switch id := binary.BigEndian.Uint16(payload); id {
	case EncapsulationCDRBE:
		d.order = binary.BigEndian
	case EncapsulationCDRLE:
		d.order = binary.LittleEndian
	default:
		d.fail("encapsulation", fmt.Sprintf("representation identifier 0x%04x is not plain CDR (0x0000 big-endian or 0x0001 little-endian); XCDR2 and parameter lists are not supported", id))
		return d
	}
	d.off = encapsulationLen
	return d
}

func (d *cdrDecoder) fail(field, reason string) {
	if d.err == nil {
		d.err = &CDRError{Field: field, Offset: d.off, Reason: reason}
	}
}

// take aligns to align bytes (relative to the end of the header) and
// returns the next n bytes, or nil after an error.
func (d *cdrDecoder) take(field string, align, n int) []byte {
	if d.err != nil {
		return nil
	}
	if pad := (align - (d.off-encapsulationLen)%align) % align; pad > 0 {
		if len(d.buf)-d.off < pad {
			d.fail(field, fmt.Sprintf("payload ends inside the alignment padding (%d bytes left)", len(d.buf)-d.off))
			return nil
		}
		d.off += pad
	}
	if n < 0 || len(d.buf)-d.off < n {
		d.fail(field, fmt.Sprintf("need %d bytes, %d left; the payload is truncated", n, len(d.buf)-d.off))
		return nil
	}
	b := d.buf[d.off : d.off+n]
	d.off += n
	return b
}

func (d *cdrDecoder) uint8(field string) uint8 {
	if b := d.take(field, 1, 1); b != nil {
		return b[0]
	}
	return 0
}

func (d *cdrDecoder) bool(field string) bool {
	v := d.uint8(field)
	if v > 1 {
		d.off--
		d.fail(field, fmt.Sprintf("boolean is %d, want 0 or 1", v))
	}
	return v == 1
}

func (d *cdrDecoder) uint32(field string) uint32 {
	if b := d.take(field, 4, 4); b != nil {
		return d.order.Uint32(b)
	}
	return 0
}

func (d *cdrDecoder) int32(field string) int32 { return int32(d.uint32(field)) }

func (d *cdrDecoder) float64(field string) float64 {
	if b := d.take(field, 8, 8); b != nil {
		return math.Float64frombits(d.order.Uint64(b))
	}
	return 0
}

// float64s fills dst (a fixed-size array field).
func (d *cdrDecoder) float64s(field string, dst []float64) {
	for i := range dst {
		dst[i] = d.float64(field)
	}
}

// seqLen reads a sequence length and checks that elemSize*n bytes can
// still follow, so a corrupt length never causes a large allocation.
func (d *cdrDecoder) seqLen(field string, elemSize int) int {
	n := d.uint32(field)
	if d.err != nil {
		return 0
	}
	if uint64(n)*uint64(elemSize) > uint64(len(d.buf)-d.off) {
		d.off -= 4
		d.fail(field, fmt.Sprintf("sequence of %d elements of %d bytes does not fit in the %d bytes left", n, elemSize, len(d.buf)-d.off-4))
		return 0
	}
	return int(n)
}

// string reads a CDR string: uint32 length including the NUL, the bytes,
// the NUL. A length of 0 (no NUL at all), which some writers emit for the
// empty string, is read as "".
func (d *cdrDecoder) string(field string) string {
	n := d.seqLen(field, 1)
	if d.err != nil || n == 0 {
		return ""
	}
	b := d.take(field, 1, n)
	if b == nil {
		return ""
	}
	if b[n-1] != 0 {
		d.off -= n
		d.fail(field, "string does not end with its NUL terminator")
		return ""
	}
	return string(b[:n-1])
}

// bytes reads a uint8 sequence; the result aliases the payload.
func (d *cdrDecoder) bytes(field string) []byte {
	n := d.seqLen(field, 1)
	if d.err != nil {
		return nil
	}
	return d.take(field, 1, n)
}

// float64Seq reads a float64 sequence into a new slice.
func (d *cdrDecoder) float64Seq(field string) []float64 {
	n := d.seqLen(field, 8)
	if d.err != nil || n == 0 {
		return nil
	}
	// Elements are 8-aligned; the check above ignores padding, so re-check
	// through take.
	out := make([]float64, n)
	d.float64s(field, out)
	return out
}

// end reports the sticky error, or an error if more than 3 bytes follow
// the last field: writers may pad a payload to a multiple of 4 bytes,
// anything longer means the payload is of another type.
func (d *cdrDecoder) end(msg string) error {
	if d.err != nil {
		return d.err
	}
	if rest := len(d.buf) - d.off; rest > 3 {
		d.fail(msg, fmt.Sprintf("%d bytes left after the last field; is this the right message type?", rest))
	}
	return d.err
}

// cdrEncoder appends a little-endian plain CDR payload to buf.
type cdrEncoder struct {
	buf  []byte
	base int // index in buf of the first byte after the header
}

// newCDREncoder starts a CDR_LE payload at the end of dst.
func newCDREncoder(dst []byte) *cdrEncoder {
	dst = append(dst, 0x00, byte(EncapsulationCDRLE), 0, 0)
	return &cdrEncoder{buf: dst, base: len(dst)}
}

func (e *cdrEncoder) align(n int) {
	for (len(e.buf)-e.base)%n != 0 {
		e.buf = append(e.buf, 0)
	}
}

func (e *cdrEncoder) uint8(v uint8) { e.buf = append(e.buf, v) }

func (e *cdrEncoder) bool(v bool) {
	if v {
		e.uint8(1)
	} else {
		e.uint8(0)
	}
}

func (e *cdrEncoder) uint32(v uint32) {
	e.align(4)
	e.buf = binary.LittleEndian.AppendUint32(e.buf, v)
}

func (e *cdrEncoder) int32(v int32) { e.uint32(uint32(v)) }

func (e *cdrEncoder) float64(v float64) {
	e.align(8)
	e.buf = binary.LittleEndian.AppendUint64(e.buf, math.Float64bits(v))
}

func (e *cdrEncoder) float64s(v []float64) {
	for _, x := range v {
		e.float64(x)
	}
}

func (e *cdrEncoder) string(s string) {
	e.uint32(uint32(len(s) + 1))
	e.buf = append(e.buf, s...)
	e.buf = append(e.buf, 0)
}

func (e *cdrEncoder) bytes(b []byte) {
	e.uint32(uint32(len(b)))
	e.buf = append(e.buf, b...)
}

func (e *cdrEncoder) float64Seq(v []float64) {
	e.uint32(uint32(len(v)))
	e.float64s(v)
}
