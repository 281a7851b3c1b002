package predictor

import "stopgap/internal/camera"

// Camera is the module's one camera model (package stopgap/internal/camera:
// intrinsics, mount, projection, horizon, validation, camera.json), named
// here so that the predictor's signatures read as before. It is the same
// type as recording.Camera: a camera read from a recording or a camera.json
// is used as it is, without conversion.
//
// The predictor needs the complete level of validation (Camera.Validate:
// the mount included, height_m > 0); its constructors check it.
type Camera = camera.Camera

// Line is an image line A u + B v + C = 0 (camera.Line), as Camera.Horizon
// returns it.
type Line = camera.Line

// MaxImageSide is the largest Camera.Width or Camera.Height Validate accepts
// (camera.MaxImageSide); it bounds the labels' size too.
const MaxImageSide = camera.MaxImageSide
