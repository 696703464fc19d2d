package reconstruct

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// TurntablePose returns the CamToWorld pose of a turntable frame: the
// world frame is the camera frame of the reference frame (the part as it
// stood then), and the plate has turned by angle radians, right-handed
// about the upward axis through point. A world point x appears in the
// frame's camera at R(x − point) + point, R the turn; CamToWorld is the
// inverse of that map.
func TurntablePose(point, up r3.Vec, angle float64) mesh.Pose {
	worldToCam := mesh.PoseFromAxisAngle(up, angle, r3.Vec{})
	worldToCam.T = r3.Sub(point, worldToCam.R.MulVec(point))
	return worldToCam.Inv()
}

// TurntableView is the part as one turntable frame saw it, in that
// frame's camera coordinates, with the plate angle relative to the
// reference frame (radians, right-handed about the upward axis).
type TurntableView struct {
	Cloud *mesh.Cloud // points with normals
	Angle float64
}

// AxisOptions tunes EstimateAxisPoint.
type AxisOptions struct {
	// MaxDistance rejects pairs farther apart than this in the first
	// iteration (metres); it shrinks to FinalDistance as the estimate
	// settles.
	// DEFAULT: 0.02, 0.004
	MaxDistance, FinalDistance float64
	// MaxNormalAngle rejects pairs whose normals differ more (radians).
	// DEFAULT: π/4
	MaxNormalAngle float64
	// Iterations bounds the alternations of pairing and solving.
	// DEFAULT: 40
	Iterations int
}

// DefaultAxisOptions returns the documented defaults.
func DefaultAxisOptions() AxisOptions {
	return AxisOptions{MaxDistance: 0.02, FinalDistance: 0.004, MaxNormalAngle: math.Pi / 4, Iterations: 40}
}

// AxisFit is the outcome of EstimateAxisPoint.
type AxisFit struct {
	Point      r3.Vec  // a point on the axis, on the plane through the initial guess normal to up
	RMS        float64 // point-to-plane residual of the last pairing (metres)
	Pairs      int     // pairs in the last pairing
	Iterations int
}

// EstimateAxisPoint finds where the turntable's axis (direction up,
// known from the plate's plane) passes, by aligning the reference view
// with the other views under the known plate angles. For a trial point p
// a reference point x appears in view k at Rₖx + (I − Rₖ)p, which is
// linear in p; pairing each moved point with its nearest neighbour in
// view k and minimising the point-to-plane residuals
// Σ((Rₖx + (I − Rₖ)p − y)·n_y)² over p's two coordinates across the
// plate is a 2×2 linear least-squares problem, alternated with re-pairing
// as in ICP (Chen & Medioni 1992). Views whose angle is near 0 or 360°
// say little (I − Rₖ ≈ 0); views far apart overlap little: a spread of
// 20°–120° either way works best. guess is the starting point (the foot
// of the part's centroid on the plate is a good one).
func EstimateAxisPoint(up, guess r3.Vec, ref *mesh.Cloud, views []TurntableView, opt AxisOptions) (AxisFit, error) {
	up = mesh.Normalize(up)
	if up == (r3.Vec{}) {
		return AxisFit{}, fmt.Errorf("reconstruct: turntable axis direction is zero: %w", mesh.ErrDegenerate)
	}
	if len(ref.Points) == 0 || len(views) == 0 {
		return AxisFit{}, fmt.Errorf("reconstruct: axis estimation needs a reference and at least one other view: %w", mesh.ErrDegenerate)
	}
	u := mesh.Normalize(r3.Cross(up, r3.Vec{X: 1}))
	if u == (r3.Vec{}) {
		u = mesh.Normalize(r3.Cross(up, r3.Vec{Y: 1}))
	}
	v := r3.Cross(up, u)
	type prepared struct {
		rot  mesh.Mat3
		ju   r3.Vec // (I − R)u
		jv   r3.Vec // (I − R)v
		tree *mesh.KDTree
		c    *mesh.Cloud
	}
	var ps []prepared
	for i, vw := range views {
		if len(vw.Cloud.Normals) != len(vw.Cloud.Points) {
			return AxisFit{}, fmt.Errorf("reconstruct: turntable view %d has no normals", i)
		}
		if len(vw.Cloud.Points) == 0 {
			continue
		}
		r := mesh.RotationFromAxisAngle(up, vw.Angle)
		ps = append(ps, prepared{
			rot:  r,
			ju:   r3.Sub(u, r.MulVec(u)),
			jv:   r3.Sub(v, r.MulVec(v)),
			tree: mesh.NewKDTree(vw.Cloud.Points),
			c:    vw.Cloud,
		})
	}
	cosMax := math.Cos(opt.MaxNormalAngle)
	p := guess
	fit := AxisFit{}
	useNormals := len(ref.Normals) == len(ref.Points)
	for it := 0; it < opt.Iterations; it++ {
		// Shrink the pairing distance geometrically over the first half.
		f := math.Min(1, float64(it)/math.Max(1, float64(opt.Iterations)/2))
		maxD := opt.MaxDistance * math.Pow(opt.FinalDistance/opt.MaxDistance, f)
		var a00, a01, a11, b0, b1, sse float64
		pairs := 0
		for _, pv := range ps {
			off := r3.Sub(p, pv.rot.MulVec(p)) // (I − R)p
			for i, x := range ref.Points {
				q := r3.Add(pv.rot.MulVec(x), off)
				j, d2 := pv.tree.Nearest(q)
				if j < 0 || d2 > maxD*maxD {
					continue
				}
				n := pv.c.Normals[j]
				if useNormals && r3.Dot(pv.rot.MulVec(ref.Normals[i]), n) < cosMax {
					continue
				}
				res := r3.Dot(r3.Sub(q, pv.c.Points[j]), n)
				gu, gv := r3.Dot(pv.ju, n), r3.Dot(pv.jv, n)
				a00 += gu * gu
				a01 += gu * gv
				a11 += gv * gv
				b0 += gu * res
				b1 += gv * res
				sse += res * res
				pairs++
			}
		}
		fit.Pairs = pairs
		fit.Iterations = it + 1
		if pairs < 10 {
			return fit, fmt.Errorf("reconstruct: turntable views do not overlap (%d pairs within %.1f mm): %w", pairs, maxD*1000, mesh.ErrDegenerate)
		}
		fit.RMS = math.Sqrt(sse / float64(pairs))
		det := a00*a11 - a01*a01
		if !(det > 1e-12*(a00*a11+1e-300)) {
			return fit, fmt.Errorf("reconstruct: the views do not constrain the axis position: %w", mesh.ErrDegenerate)
		}
		da := -(a11*b0 - a01*b1) / det
		db := -(a00*b1 - a01*b0) / det
		p = r3.Add(p, r3.Add(r3.Scale(da, u), r3.Scale(db, v)))
		fit.Point = p
		if math.Hypot(da, db) < 1e-7 && f >= 1 {
			break
		}
	}
	return fit, nil
}

// PickAxisViews chooses, from plate angles relative to the reference
// frame (radians), up to n frame indices whose turns lie between 20° and
// 120° either way, spread evenly: enough turn for (I − R) to see the
// axis, enough overlap to pair points.
func PickAxisViews(angles []float64, n int) []int {
	type cand struct {
		i int
		a float64 // signed turn in (−π, π]
	}
	var cs []cand
	for i, a := range angles {
		w := math.Remainder(a, 2*math.Pi)
		if d := math.Abs(w); d >= 20*math.Pi/180 && d <= 120*math.Pi/180 {
			cs = append(cs, cand{i, w})
		}
	}
	if len(cs) <= n {
		out := make([]int, len(cs))
		for k, c := range cs {
			out[k] = c.i
		}
		return out
	}
	slices.SortFunc(cs, func(x, y cand) int {
		if x.a < y.a {
			return -1
		}
		if x.a > y.a {
			return 1
		}
		return x.i - y.i
	})
	var out []int
	for k := 0; k < n; k++ {
		out = append(out, cs[k*(len(cs)-1)/max(1, n-1)].i)
	}
	slices.Sort(out)
	return slices.Compact(out)
}
