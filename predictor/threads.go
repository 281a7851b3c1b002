package predictor

import "stopgap/internal/cvref"

// SetOpenCVThreads sets the number of threads OpenCV may use for its own
// parallel loops (cv::setNumThreads; gocv v0.31.0 does not wrap it) and
// returns the previous count so it can be restored. n = 1 (or 0) runs every
// OpenCV call on the calling goroutine's thread; n < 0 restores OpenCV's
// default (cv::setNumThreads documentation, from memory).
// The setting is process-wide: it affects every package that calls OpenCV.
func SetOpenCVThreads(n int) (previous int) { return cvref.SetNumThreads(n) }

// OpenCVThreads returns OpenCV's current thread count (cv::getNumThreads).
func OpenCVThreads() int { return cvref.NumThreads() }
