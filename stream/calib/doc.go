// Package calib reads a camera's intrinsics from the calibration files
// teams already have and turns them into stopgap's camera (package
// stopgap/internal/camera's Camera, the content of camera.json) with a zero
// mount, checked at the intrinsics level (Camera.ValidateIntrinsics):
//
//   - OpenCV FileStorage, YAML or XML, as OpenCV's calibration sample
//     (samples/cpp/calibration.cpp) writes it: image_width, image_height,
//     camera_matrix and distortion_coefficients, the matrices as
//     "opencv-matrix" nodes (rows, cols, dt, data);
//   - a ROS camera_info YAML file, as the ROS camera calibration tools write
//     it: image_width, image_height, camera_matrix and
//     distortion_coefficients as {rows, cols, data}, and distortion_model.
//
// The same conversion ([FromKD]) serves the importer of ROS 2 recordings,
// whose CameraInfo messages carry the same K and D.
//
// Conventions: the camera matrix is K = [fx 0 cx; 0 fy cy; 0 0 1] in pixels
// with pixel centres at integer coordinates (OpenCV's); the distortion
// coefficients are OpenCV's (k1, k2, p1, p2[, k3[, k4, k5, k6...]]), the
// Brown-Conrady model that ROS calls "plumb_bob". Only k1 k2 p1 p2 k3 exist
// in stopgap's camera model: further coefficients must be zero.
package calib
