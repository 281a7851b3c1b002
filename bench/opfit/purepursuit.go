package opfit

import (
	"fmt"
	"math"
)

// Pose is a planar vehicle pose in the world frame (ISO 8855: x forward at
// yaw 0, y left, yaw counter-clockwise), of the rear-axle centre.
type Pose struct {
	XM, YM, YawRad float64
}

// Path is a reference path: points in driving order, at most a few metres
// apart.
type Path struct {
	XM, YM []float64
}

// PurePursuit is the reference path follower of Coulter (1992),
// "Implementation of the Pure Pursuit Path Tracking Algorithm" (CMU-RI-TR-
// 92-01): steer the rear-axle centre on the circular arc through the goal
// point, the point of the path LookaheadM ahead, so for a kinematic bicycle
// of wheelbase L
//
//	δ = atan(2 L sin α / Ld),   α = angle of the goal point in the vehicle frame
//
// (curvature 2 sin α / Ld, Coulter's 2x/l² with x the goal point's lateral
// offset). On a circle of radius R with the goal on it, δ = atan(L / R)
// exactly.
type PurePursuit struct {
	LookaheadM float64
	WheelbaseM float64
}

// Steer returns the road-wheel angle (rad, positive left) pure pursuit
// commands at pose p, searching the path from index *hint on (updated; pass
// a variable that starts at 0 and keep it for the next call along the same
// drive). The goal point is the first path point at least LookaheadM from
// p after the nearest path point; past the end of the path, the last point.
func (pp PurePursuit) Steer(path Path, p Pose, hint *int) (float64, error) {
	n := len(path.XM)
	if n < 2 || len(path.YM) != n {
		return 0, fmt.Errorf("%w: a path needs 2 or more points with x and y", ErrBadData)
	}
	if !(pp.LookaheadM > 0) || !(pp.WheelbaseM > 0) {
		return 0, fmt.Errorf("%w: pure pursuit lookahead %g m and wheelbase %g m must be > 0", ErrBadConfig, pp.LookaheadM, pp.WheelbaseM)
	}
	i := min(max(*hint, 0), n-1)
	// Nearest point, searching forward while the distance decreases (with a
	// short look past small bumps).
	best, bestD := i, math.Inf(1)
	for j := i; j < n && j < i+2000; j++ {
		d := math.Hypot(path.XM[j]-p.XM, path.YM[j]-p.YM)
		if d < bestD {
			best, bestD = j, d
		} else if d > bestD+2*pp.LookaheadM {
			break
		}
	}
	*hint = best
	g := n - 1
	for j := best; j < n; j++ {
		if math.Hypot(path.XM[j]-p.XM, path.YM[j]-p.YM) >= pp.LookaheadM {
			g = j
			break
		}
	}
	dx, dy := path.XM[g]-p.XM, path.YM[g]-p.YM
	ld := math.Hypot(dx, dy)
	if ld == 0 {
		return 0, nil
	}
	alpha := math.Atan2(dy, dx) - p.YawRad
	return math.Atan(2 * pp.WheelbaseM * math.Sin(alpha) / ld), nil
}
