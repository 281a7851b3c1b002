// Package predictor fills gaps in a vehicle's video with predicted frames:
// the last real frame warped on the CPU to where the camera should be now,
// always labelled in the pixels, and only while the motion estimate is
// trusted; otherwise an honest STALE picture.
//
// # Conventions
//
// Units are SI and carried in names: TimeUs (int64 microseconds on the
// vehicle clock), HeightM, PitchDeg, AgeMs, SigmaPx.
//
// Vehicle frame (ISO 8855): x forward, y left, z up, origin at the rotation
// centre on the ground; positive yaw turns left. Camera frame (OpenCV): x
// right, y down, z forward along the optical axis. Pixels: OpenCV, (u, v) =
// (column, row), pixel centres at integer coordinates.
//
// A Camera sits at C = (XOffsetM, YOffsetM, HeightM) in the vehicle frame.
// PitchDeg > 0 tilts the optical axis down; RollDeg > 0 turns the camera
// about its optical axis by the right-hand rule (right side of the image
// dips; in the image the horizon rises to the right). The rotation R_cv from
// vehicle to camera coordinates and the OpenCV projection with distortion are
// documented on Camera.
//
// # Geometry
//
// A filter.Motion (DxM, DyM, DyawRad) is the rigid motion of the vehicle
// from T0 to T1 in the vehicle frame at T0. The camera then moves by
// X1 = R X0 + t (camera coordinates at T0 -> T1) with
//
//	R = R_cv Rz(ψ)ᵀ R_cvᵀ,   t = R_cv (Rz(ψ)ᵀ (C - D) - C),   D = (DxM, DyM, 0).
//
// The road is the plane n·X + d = 0 in the T0 camera frame, n the upward unit
// normal, d = HeightM. Pixels of road points map by the ground homography
//
//	H_ground = K (R - t nᵀ / d) K⁻¹
//
// and far scenery (above the horizon) by the rotation homography
// H_rot = K R K⁻¹. Both map T0 pixels to T1 pixels in undistorted geometry.
// The horizon is the line -K⁻ᵀ n; it is the same in every frame because the
// camera keeps its height and attitude over the road.
//
// # Synthesis
//
// Synthesizer writes rows above the horizon band with H_rot, rows below with
// H_ground, each straight into the caller's frame through a row view and the
// homography composed with the row offset, and only the band rows (BandPx,
// default 24, centred on the horizon) with both, blended linearly. Pixels
// without a source are NeutralGrey and counted exactly. With lens distortion
// the source is undistorted first and predicted frames are in pinhole
// geometry. Every warp goes through the package's own bilinear fixed-point
// kernel (warpkernel.c: AVX2 or portable C, the arithmetic of
// cv::warpPerspective).
//
// SynthesizeScene adds the held frame's upright structure (UprightModel,
// estimated per held frame by UprightEstimator): vertical planes standing on
// the road, one per column band, each warped with its own plane-induced
// homography K (R + t nᵀ/d) K⁻¹, nearer ones in front (and, where a
// farther facade shows above a band's segment, a second, stacked one, seen
// down to the nearer one's top); pixels uncovered
// behind them are NeutralGrey, not invented. A segment's surface starts,
// column by column, at the first row of the held frame that shows
// structure (UprightModel.Tops), so sky beside a roofline or beside a
// building's edge inside a band is moved with the far scene, not marked.
//
// # Confidence and policy
//
// ConfidenceModel propagates the motion covariance to the pixel positions of
// road points 5, 10 and 20 m ahead of the camera through the analytic
// Jacobian, takes the worst 1-sigma error sigma_px and reports the
// probability that the misalignment of those points stays within
// ToleranceMrad (default 10 mrad): erf(tol_px / (sqrt(2) sigma_px)),
// tol_px = ToleranceMrad/1000 · Fx, so the confidence does not depend on the
// image resolution. Policy makes a
// tick LIVE when a real frame is due and here, PREDICTED when it is missing,
// confidence >= CutoffConfidence (default 0.5) and the real frame is at most
// MaxAgeMs (default 800) old, and STALE otherwise. Filler runs this per
// display tick for both the offline replay and the live relay.
//
// # Labels
//
// PREDICTED and STALE frames are labelled in the pixels, so the label
// survives any encoder and player: a striped amber/black border with state,
// age and confidence for PREDICTED; a red border, a desaturated and dimmed
// image and a "STALE - NOT LIVE" warning with the age for STALE. LIVE frames
// are never labelled. A synthetic frame must never pass for a live one.
//
// # SAFETY
//
// A predicted frame moves the static scene only. It is built from one old
// picture and the vehicle's own motion: anything that moved during the gap
// (vehicles, cyclists, pedestrians, a barrier) is shown where it was when the
// real frame was taken, and anything that appeared during the gap is not
// shown at all. Objects above the road that the upright model does not
// capture (anything but broad vertical surfaces: posts, people, vehicles)
// are placed as if they were on the road (below the horizon) or far away
// (above it), so near obstacles are misplaced. Regions that moved between
// the last two real frames are marked (MoverDetector, Labeler.DrawMovers),
// not moved; a missing mark does not mean nothing moved, and marks do not
// change the confidence. Predicted frames are an aid to keep the operator
// oriented through short gaps, never a substitute for live video; the age
// cap and the confidence cutoff bound how long they are shown.
//
// # Buffers and threads
//
// Synthesizer, Labeler and Filler own preallocated OpenCV buffers (Close
// frees them) and are not safe for concurrent use. Destination frames are
// owned by the caller and reused; the per-tick paths do not allocate once
// they have the right size. OpenCV's thread count is process-wide; the
// benchmarks pin it to one thread.
package predictor
