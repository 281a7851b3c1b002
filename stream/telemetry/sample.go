package telemetry

import "stopgap/filter"

// ToSample converts the message to the filter's sample shape. Units and
// axes are the same on both sides; the sequence number is dropped.
func (m Message) ToSample() filter.Sample {
	return filter.Sample{
		TimeUs:     m.TimeUs,
		SpeedMps:   m.SpeedMps,
		YawRateRps: m.YawRateRps,
		AccelMps2:  m.AccelMps2,
		HasAccel:   m.HasAccel,
		SteerRad:   m.SteerRad,
		HasSteer:   m.HasSteer,
	}
}
