package ros2

import (
	"encoding/json"
	"fmt"
	"math"
)

// Topics of a replay written beside the recording it replayed, so that a
// general-purpose viewer shows what the operator would have seen next to
// what the camera saw.
const (
	// ShownImageTopic carries, for every tick whose real frame was missing,
	// the frame the operator would have seen, as a JPEG CompressedImage
	// stamped with the tick's capture time. These frames carry their
	// PREDICTED or STALE label in their pixels: they are synthetic and must
	// never be mistaken for camera frames.
	ShownImageTopic = "/stopgap/shown/compressed"
	// TickStateTopic carries one TickState per display tick (JSON).
	TickStateTopic = "/stopgap/tick"
	// TickStateSchema names the JSON schema of TickStateTopic.
	TickStateSchema = "stopgap.TickState"
)

// TickState is the state of one display tick: the JSON message of
// TickStateTopic. Field names are those of a replay's ticks.csv.
type TickState struct {
	Tick       int     `json:"tick"`
	CaptureUs  int64   `json:"t_capture_us"` // the tick's frame capture time, vehicle clock, µs
	State      string  `json:"state"`        // LIVE, PREDICTED or STALE
	AgeMs      float64 `json:"age_ms"`       // age of the held frame shown, ms (0 when LIVE)
	Confidence float64 `json:"confidence"`   // the filter's confidence in [0, 1]; NaN if not computed (written as null)
}

// tickStateJSONSchema is the JSON Schema (draft 2020-12) of TickState.
const tickStateJSONSchema = `{"$schema":"https://json-schema.org/draft/2020-12/schema","title":"stopgap display tick","type":"object",` +
	`"properties":{"tick":{"type":"integer"},"t_capture_us":{"type":"integer"},"state":{"type":"string","enum":["LIVE","PREDICTED","STALE"]},` +
	`"age_ms":{"type":"number"},"confidence":{"type":["number","null"],"minimum":0,"maximum":1}},` +
	`"required":["tick","t_capture_us","state","age_ms","confidence"]}`

// WriteTick writes one tick's state on TickStateTopic and, if jpeg is not
// empty, the frame shown at that tick on ShownImageTopic (frame id
// ExportCameraFrame), both at the tick's capture time.
func (mw *MCAPWriter) WriteTick(st TickState, jpeg []byte) error {
	if math.IsNaN(st.AgeMs) || math.IsInf(st.AgeMs, 0) || math.IsInf(st.Confidence, 0) {
		return fmt.Errorf("ros2: %w: tick %d has a non-finite age or confidence", ErrMessage, st.Tick)
	}
	type wire TickState
	msg := struct {
		wire
		Confidence *float64 `json:"confidence"`
	}{wire: wire(st)}
	if !math.IsNaN(st.Confidence) {
		msg.Confidence = &st.Confidence
	}
	b, err := json.Marshal(msg)
	if err != nil {
		return fmt.Errorf("ros2: tick %d: %w", st.Tick, err)
	}
	if err := mw.WriteJSON(TickStateTopic, TickStateSchema, []byte(tickStateJSONSchema), st.CaptureUs, b); err != nil {
		return err
	}
	if len(jpeg) == 0 {
		return nil
	}
	img := CompressedImage{Header: Header{Stamp: TimeFromUs(st.CaptureUs), FrameID: ExportCameraFrame}, Format: "jpeg", Data: jpeg}
	return mw.Write(ShownImageTopic, TypeCompressedImage, st.CaptureUs, &img)
}
