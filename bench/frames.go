package bench

import (
	"fmt"
	"path/filepath"

	"gocv.io/x/gocv"

	"stopgap/stream/recording"
)

// frameCacheSize is how many decoded frames a frameSource keeps. Replay
// needs two at once (the held frame and the true one); with a video file,
// a frame that arrives late must still be in the cache to be held, so it
// keeps about two seconds at 30 fps.
const frameCacheSize = 64

// frameSource loads the frames of a recording by index, checking each
// against the size in camera.json. Mats returned by Get are owned by the
// source and stay valid until frameCacheSize further frames are loaded.
type frameSource struct {
	rec           *recording.Recording
	width, height int
	video         *gocv.VideoCapture
	next          int // next frame index the video would decode
	cache         map[int]gocv.Mat
	order         []int // cache keys, oldest first
}

func newFrameSource(rec *recording.Recording, width, height int) (*frameSource, error) {
	fs := &frameSource{rec: rec, width: width, height: height, cache: map[int]gocv.Mat{}}
	if rec.VideoFile != "" {
		path := filepath.Join(rec.Dir, rec.VideoFile)
		vc, err := gocv.VideoCaptureFile(path)
		if err != nil || !vc.IsOpened() {
			if vc != nil {
				vc.Close()
			}
			return nil, fmt.Errorf("%s: cannot open the video (is it a format OpenCV's FFmpeg backend reads?): %v: %w", path, err, ErrReplayInput)
		}
		fs.video = vc
	}
	return fs, nil
}

// Get returns frame i.
func (fs *frameSource) Get(i int) (gocv.Mat, error) {
	if m, ok := fs.cache[i]; ok {
		return m, nil
	}
	if fs.video != nil {
		return fs.getVideo(i)
	}
	path, err := fs.rec.FramePath(i)
	if err != nil {
		return gocv.Mat{}, err
	}
	m := gocv.IMRead(path, gocv.IMReadColor)
	if m.Empty() {
		m.Close()
		return gocv.Mat{}, fmt.Errorf("%s (frame %d, frames.csv line %d): cannot decode the image; replace or remove the frame: %w", path, i, i+2, ErrReplayInput)
	}
	if err := fs.check(m, fmt.Sprintf("%s (frame %d, frames.csv line %d)", path, i, i+2)); err != nil {
		m.Close()
		return gocv.Mat{}, err
	}
	fs.put(i, m)
	return m, nil
}

func (fs *frameSource) getVideo(i int) (gocv.Mat, error) {
	path := filepath.Join(fs.rec.Dir, fs.rec.VideoFile)
	if i < fs.next {
		return gocv.Mat{}, fmt.Errorf("%s: frame %d is no longer cached (a frame that late cannot be replayed from a video file; use image files): %w", path, i, ErrReplayInput)
	}
	for fs.next <= i {
		m := gocv.NewMat()
		if ok := fs.video.Read(&m); !ok || m.Empty() {
			m.Close()
			return gocv.Mat{}, fmt.Errorf("%s: the video ends at frame %d but frames.csv lists %d frames: %w", path, fs.next, len(fs.rec.Frames), ErrReplayInput)
		}
		if err := fs.check(m, fmt.Sprintf("%s frame %d", path, fs.next)); err != nil {
			m.Close()
			return gocv.Mat{}, err
		}
		fs.put(fs.next, m)
		fs.next++
	}
	return fs.cache[i], nil
}

func (fs *frameSource) check(m gocv.Mat, what string) error {
	if m.Cols() != fs.width || m.Rows() != fs.height {
		return fmt.Errorf("%s is %dx%d but camera.json says %dx%d: %w", what, m.Cols(), m.Rows(), fs.width, fs.height, ErrReplayInput)
	}
	if m.Type() != gocv.MatTypeCV8UC3 {
		return fmt.Errorf("%s is not an 8-bit 3-channel image: %w", what, ErrReplayInput)
	}
	return nil
}

func (fs *frameSource) put(i int, m gocv.Mat) {
	fs.cache[i] = m
	fs.order = append(fs.order, i)
	for len(fs.order) > frameCacheSize {
		old := fs.order[0]
		fs.order = fs.order[1:]
		m := fs.cache[old]
		m.Close()
		delete(fs.cache, old)
	}
}

// Close frees every cached frame and the video reader.
func (fs *frameSource) Close() {
	for _, m := range fs.cache {
		m.Close()
	}
	fs.cache = nil
	if fs.video != nil {
		fs.video.Close()
	}
}
