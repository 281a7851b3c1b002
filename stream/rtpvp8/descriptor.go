package rtpvp8

// Descriptor is the VP8 payload descriptor at the start of every RTP payload
// carrying VP8 (RFC 7741 section 4.2):
//
//	     0 1 2 3 4 5 6 7
//	    +-+-+-+-+-+-+-+-+
//	    |X|R|N|S|R| PID | (required)
//	    +-+-+-+-+-+-+-+-+
//	X:  |I|L|T|K| RSV   | (present when X=1)
//	    +-+-+-+-+-+-+-+-+
//	I:  |M| PictureID   | (present when I=1; M=1 adds a second octet)
//	    +-+-+-+-+-+-+-+-+
//	    |   PictureID   |
//	    +-+-+-+-+-+-+-+-+
//	L:  |   TL0PICIDX   | (present when L=1)
//	    +-+-+-+-+-+-+-+-+
//	T/K:|TID|Y| KEYIDX  | (present when T=1 or K=1)
//	    +-+-+-+-+-+-+-+-+
//
// The zero value is the one-octet descriptor of a continuation packet
// (S=0, PID=0, no extensions). The X bit is not stored: it is set on writing
// exactly when one of the optional fields is present. Reserved bits (R, RSV)
// are ignored on reading and written as zero, as the RFC requires.
type Descriptor struct {
	// NonReference is the N bit: the frame is not used as a reference by
	// other frames and may be discarded.
	NonReference bool
	// Start is the S bit: the first VP8 data octet of this packet begins a
	// VP8 partition. It is set on the first packet of every frame.
	Start bool
	// PartitionID is PID, 0 to 7: the VP8 partition the first data octet
	// belongs to. The first packet of a frame has Start set and PID 0.
	PartitionID uint8

	// HasPictureID is the I bit: PictureID is present.
	HasPictureID bool
	// WidePictureID is the M bit: PictureID is 15 bits (two octets)
	// rather than 7 bits (one octet).
	WidePictureID bool
	// PictureID is the running picture index, 0 to 127 or 0 to 32767
	// when WidePictureID is set. It wraps.
	PictureID uint16

	// HasTL0PicIdx is the L bit: TL0PicIdx is present.
	HasTL0PicIdx bool
	// TL0PicIdx is TL0PICIDX, the running index of the temporal base
	// layer frames.
	TL0PicIdx uint8

	// HasTID is the T bit: TID and LayerSync are present.
	HasTID bool
	// TID is the temporal layer index, 0 to 3.
	TID uint8
	// LayerSync is the Y bit: the frame depends only on temporal base layer
	// frames.
	LayerSync bool

	// HasKeyIdx is the K bit: KeyIdx is present.
	HasKeyIdx bool
	// KeyIdx is KEYIDX, 0 to 31, the running index of keyframes.
	KeyIdx uint8
}

// FrameStart reports whether the packet begins a VP8 frame: S=1 and PID=0
// (RFC 7741 section 4.2: the S bit is set on the first packet of each frame,
// whose first octet is in partition 0).
func (d *Descriptor) FrameStart() bool { return d.Start && d.PartitionID == 0 }

// Unmarshal parses the descriptor at the start of an RTP payload and returns
// its length n; the VP8 data is payload[n:], which is never empty on success.
// Every optional field is bounds checked: a truncated descriptor gives a
// [*DescriptorError] wrapping [ErrShortDescriptor], a descriptor with no VP8
// data after it one wrapping [ErrNoVP8Data]. On error d is left unchanged.
// Unmarshal does not retain payload.
func (d *Descriptor) Unmarshal(payload []byte) (n int, err error) {
	short := func(field string, off int) (int, error) {
		return 0, &DescriptorError{Field: field, Offset: off, Len: len(payload), Err: ErrShortDescriptor}
	}
	if len(payload) < 1 {
		return short("required octet", 0)
	}
	var r Descriptor
	b := payload[0]
	r.NonReference = b&0x20 != 0
	r.Start = b&0x10 != 0
	r.PartitionID = b & 0x07
	n = 1
	if b&0x80 != 0 { // X
		if len(payload) < n+1 {
			return short("extension octet", n)
		}
		x := payload[n]
		n++
		r.HasPictureID = x&0x80 != 0
		r.HasTL0PicIdx = x&0x40 != 0
		r.HasTID = x&0x20 != 0
		r.HasKeyIdx = x&0x10 != 0
		if r.HasPictureID {
			if len(payload) < n+1 {
				return short("PictureID", n)
			}
			if payload[n]&0x80 != 0 { // M: 15-bit picture ID
				if len(payload) < n+2 {
					return short("PictureID", n)
				}
				r.WidePictureID = true
				r.PictureID = uint16(payload[n]&0x7f)<<8 | uint16(payload[n+1])
				n += 2
			} else {
				r.PictureID = uint16(payload[n])
				n++
			}
		}
		if r.HasTL0PicIdx {
			if len(payload) < n+1 {
				return short("TL0PICIDX", n)
			}
			r.TL0PicIdx = payload[n]
			n++
		}
		if r.HasTID || r.HasKeyIdx {
			if len(payload) < n+1 {
				return short("TID/Y/KEYIDX", n)
			}
			tk := payload[n]
			n++
			if r.HasTID {
				r.TID = tk >> 6
				r.LayerSync = tk&0x20 != 0
			}
			if r.HasKeyIdx {
				r.KeyIdx = tk & 0x1f
			}
		}
	}
	if len(payload) <= n {
		return 0, &DescriptorError{Field: "VP8 data", Offset: n, Len: len(payload), Err: ErrNoVP8Data}
	}
	*d = r
	return n, nil
}

// extended reports whether the X octet is needed.
func (d *Descriptor) extended() bool {
	return d.HasPictureID || d.HasTL0PicIdx || d.HasTID || d.HasKeyIdx
}

// MarshalSize returns the number of octets [Descriptor.MarshalTo] writes:
// 1 to 6.
func (d *Descriptor) MarshalSize() int {
	n := 1
	if !d.extended() {
		return n
	}
	n++
	if d.HasPictureID {
		n++
		if d.WidePictureID {
			n++
		}
	}
	if d.HasTL0PicIdx {
		n++
	}
	if d.HasTID || d.HasKeyIdx {
		n++
	}
	return n
}

// Validate reports whether every field fits its bit width; it returns an
// error wrapping [ErrFieldRange] naming the first field that does not.
func (d *Descriptor) Validate() error {
	switch {
	case d.PartitionID > 7:
		return fieldRange("PartitionID", int(d.PartitionID), 7)
	case d.HasPictureID && d.WidePictureID && d.PictureID > 0x7fff:
		return fieldRange("PictureID (15-bit)", int(d.PictureID), 0x7fff)
	case d.HasPictureID && !d.WidePictureID && d.PictureID > 0x7f:
		return fieldRange("PictureID (7-bit)", int(d.PictureID), 0x7f)
	case d.HasTID && d.TID > 3:
		return fieldRange("TID", int(d.TID), 3)
	case d.HasKeyIdx && d.KeyIdx > 31:
		return fieldRange("KeyIdx", int(d.KeyIdx), 31)
	}
	return nil
}

// MarshalTo writes the descriptor to the start of buf and returns the number
// of octets written. It fails with [ErrFieldRange] if a field does not fit
// (see [Descriptor.Validate]) and with [ErrShortBuffer] if buf is shorter
// than [Descriptor.MarshalSize]. Fields whose presence bit is clear are not
// written, whatever their value.
func (d *Descriptor) MarshalTo(buf []byte) (int, error) {
	if err := d.Validate(); err != nil {
		return 0, err
	}
	size := d.MarshalSize()
	if len(buf) < size {
		return 0, ErrShortBuffer
	}
	b := d.PartitionID
	if d.NonReference {
		b |= 0x20
	}
	if d.Start {
		b |= 0x10
	}
	if !d.extended() {
		buf[0] = b
		return 1, nil
	}
	buf[0] = b | 0x80
	var x byte
	if d.HasPictureID {
		x |= 0x80
	}
	if d.HasTL0PicIdx {
		x |= 0x40
	}
	if d.HasTID {
		x |= 0x20
	}
	if d.HasKeyIdx {
		x |= 0x10
	}
	buf[1] = x
	n := 2
	if d.HasPictureID {
		if d.WidePictureID {
			buf[n] = 0x80 | byte(d.PictureID>>8)
			buf[n+1] = byte(d.PictureID)
			n += 2
		} else {
			buf[n] = byte(d.PictureID)
			n++
		}
	}
	if d.HasTL0PicIdx {
		buf[n] = d.TL0PicIdx
		n++
	}
	if d.HasTID || d.HasKeyIdx {
		var tk byte
		if d.HasTID {
			tk = d.TID<<6 | boolBit(d.LayerSync)<<5
		}
		if d.HasKeyIdx {
			tk |= d.KeyIdx
		}
		buf[n] = tk
		n++
	}
	return n, nil
}

func boolBit(b bool) byte {
	if b {
		return 1
	}
	return 0
}
