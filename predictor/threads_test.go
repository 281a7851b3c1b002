package predictor

import "testing"

func TestSetOpenCVThreads(t *testing.T) {
	prev := SetOpenCVThreads(1)
	defer SetOpenCVThreads(prev)
	if got := OpenCVThreads(); got != 1 {
		t.Fatalf("OpenCVThreads() = %d after SetOpenCVThreads(1)", got)
	}
}
