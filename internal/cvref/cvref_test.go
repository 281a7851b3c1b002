package cvref

import (
	"math"
	"testing"
)

// TestProjectPointsPinhole checks the wrapper against the pinhole formula
// u = fx*X/Z + cx, v = fy*Y/Z + cy (OpenCV calib3d documentation, camera model
// section) for an identity pose and zero distortion.
func TestProjectPointsPinhole(t *testing.T) {
	k := [3][3]float64{{800, 0, 320}, {0, 700, 240}, {0, 0, 1}}
	got, err := ProjectPoints([][3]float64{{1, 2, 10}, {-3, 0.5, 4}}, [3]float64{}, [3]float64{}, k, [5]float64{})
	if err != nil {
		t.Fatal(err)
	}
	want := [][2]float64{{800*0.1 + 320, 700*0.2 + 240}, {800*-0.75 + 320, 700*0.125 + 240}}
	for i := range want {
		if math.Abs(got[i][0]-want[i][0]) > 1e-9 || math.Abs(got[i][1]-want[i][1]) > 1e-9 {
			t.Errorf("point %d: got %v want %v", i, got[i], want[i])
		}
	}
}

// TestRodriguesQuarterTurn: a rotation of +90 degrees about z has rotation
// vector (0, 0, pi/2) (axis-angle definition).
func TestRodriguesQuarterTurn(t *testing.T) {
	v, err := Rodrigues([3][3]float64{{0, -1, 0}, {1, 0, 0}, {0, 0, 1}})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(v[0]) > 1e-12 || math.Abs(v[1]) > 1e-12 || math.Abs(v[2]-math.Pi/2) > 1e-12 {
		t.Fatalf("got %v want (0,0,pi/2)", v)
	}
}

// TestNumThreadsRoundTrip checks that the setting reaches OpenCV and can be restored.
func TestNumThreadsRoundTrip(t *testing.T) {
	prev := SetNumThreads(1)
	defer SetNumThreads(prev)
	if got := NumThreads(); got != 1 {
		t.Fatalf("after SetNumThreads(1) got %d", got)
	}
}
