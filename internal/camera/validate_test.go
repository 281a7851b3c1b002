package camera

import (
	"errors"
	"math"
	"testing"
)

// good is a made-up but plausible mount with every term non-zero.
var good = Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1010, Cx: 640.5, Cy: 360.2,
	K1: -0.1, K2: 0.02, P1: 0.001, P2: -0.001, K3: 0.003,
	HeightM: 1.4, PitchDeg: 6, RollDeg: 2.5, XOffsetM: 1.8, YOffsetM: 0.3}

func TestValidateLevels(t *testing.T) {
	cases := []struct {
		name       string
		mod        func(*Camera)
		intrinsics string // key ValidateIntrinsics names, "" if it accepts
		complete   string // key Validate names, "" if it accepts
	}{
		{"good", func(c *Camera) {}, "", ""},
		{"intrinsics only (no mount)", func(c *Camera) { c.HeightM, c.PitchDeg, c.RollDeg, c.XOffsetM, c.YOffsetM = 0, 0, 0, 0, 0 }, "", "height_m"},
		{"zero width", func(c *Camera) { c.Width = 0 }, "width", "width"},
		{"huge height", func(c *Camera) { c.Height = MaxImageSide + 1 }, "height", "height"},
		{"largest side", func(c *Camera) { c.Width = MaxImageSide }, "", ""},
		{"zero fx", func(c *Camera) { c.Fx = 0 }, "fx", "fx"},
		{"negative fy", func(c *Camera) { c.Fy = -5 }, "fy", "fy"},
		{"nan cx", func(c *Camera) { c.Cx = math.NaN() }, "cx", "cx"},
		{"inf k1", func(c *Camera) { c.K1 = math.Inf(1) }, "k1", "k1"},
		{"nan k3", func(c *Camera) { c.K3 = math.NaN() }, "k3", "k3"},
		{"cx outside", func(c *Camera) { c.Cx = 1280.5 }, "cx", "cx"},
		{"cx on the edge", func(c *Camera) { c.Cx = 1280 }, "", ""},
		{"cy negative", func(c *Camera) { c.Cy = -1 }, "cy", "cy"},
		{"height zero", func(c *Camera) { c.HeightM = 0 }, "", "height_m"},
		{"height negative", func(c *Camera) { c.HeightM = -1 }, "", "height_m"},
		{"height inf", func(c *Camera) { c.HeightM = math.Inf(1) }, "", "height_m"},
		{"pitch 89", func(c *Camera) { c.PitchDeg = 89 }, "", "pitch_deg"},
		{"pitch -88.9", func(c *Camera) { c.PitchDeg = -88.9 }, "", ""},
		{"roll -45", func(c *Camera) { c.RollDeg = -45 }, "", "roll_deg"},
		{"roll nan", func(c *Camera) { c.RollDeg = math.NaN() }, "", "roll_deg"},
		{"nan x offset", func(c *Camera) { c.XOffsetM = math.NaN() }, "", "x_offset_m"},
		{"inf y offset", func(c *Camera) { c.YOffsetM = math.Inf(-1) }, "", "y_offset_m"},
		{"intrinsics first", func(c *Camera) { c.Fx, c.HeightM = 0, 0 }, "fx", "fx"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := good
			tc.mod(&c)
			for _, level := range []struct {
				name string
				err  error
				want string
			}{{"ValidateIntrinsics", c.ValidateIntrinsics(), tc.intrinsics}, {"Validate", c.Validate(), tc.complete}} {
				if level.want == "" {
					if level.err != nil {
						t.Errorf("%s = %v, want nil", level.name, level.err)
					}
					continue
				}
				var ce *Error
				if !errors.As(level.err, &ce) || !errors.Is(level.err, ErrInvalid) {
					t.Errorf("%s = %v, want *Error wrapping ErrInvalid", level.name, level.err)
					continue
				}
				if ce.Key != level.want {
					t.Errorf("%s names %q, want %q (%v)", level.name, ce.Key, level.want, level.err)
				}
			}
		})
	}
}

func TestZeroCameraIsInvalid(t *testing.T) {
	var c Camera
	if err := c.ValidateIntrinsics(); !errors.Is(err, ErrInvalid) {
		t.Errorf("ValidateIntrinsics of the zero Camera = %v, want ErrInvalid", err)
	}
	if err := c.Validate(); !errors.Is(err, ErrInvalid) {
		t.Errorf("Validate of the zero Camera = %v, want ErrInvalid", err)
	}
}
