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

// AxisPair is one alignment of what the turntable carries: From's
// points, turned by Angle (radians, right-handed about the upward axis)
// about the axis, should land on To's surface. Pairing frame 0's points
// (From) with a later frame's (To) uses that frame's plate angle; pairing
// a frame's points (From) with the fused model (To, in frame 0's pose)
// uses minus its angle. To must have normals; From's normals, when
// present, reject pairs whose normals disagree.
type AxisPair struct {
	From, To *mesh.Cloud
	Angle    float64
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
	// Neighbours is how many nearest target points make the local
	// surface a moved point is paired with.
	// DEFAULT: 16
	Neighbours int
}

// DefaultAxisOptions returns the documented defaults.
func DefaultAxisOptions() AxisOptions {
	return AxisOptions{MaxDistance: 0.02, FinalDistance: 0.004, MaxNormalAngle: math.Pi / 4, Iterations: 40, Neighbours: 16}
}

// AxisFit is the outcome of EstimateAxisPoint.
type AxisFit struct {
	Point      r3.Vec  // a point on the axis, on the plane through the initial guess normal to up
	RMS        float64 // point-to-plane residual of the last pairing (metres)
	Pairs      int     // pairs in the last pairing
	Iterations int
}

// EstimateAxisPoint finds where the turntable's axis (direction up,
// known from the plate's plane) passes, from alignments under known
// plate angles. For a trial point p a point x turned by R about the axis
// lands at Rx + (I − R)p, which is linear in p; pairing each moved point
// with its nearest neighbour on the target and minimising the
// point-to-plane residuals Σ((Rx + (I − R)p − y)·n_y)² over p's two
// coordinates across the plate is a 2×2 linear least-squares problem,
// alternated with re-pairing as in ICP (Chen & Medioni 1992). Turns near
// 0 or 360° say little (I − R ≈ 0); views far apart overlap little. guess
// is the starting point (the foot of the part's centroid on the plate is
// a good one).
func EstimateAxisPoint(up, guess r3.Vec, pairs []AxisPair, opt AxisOptions) (AxisFit, error) {
	up = mesh.Normalize(up)
	if up == (r3.Vec{}) {
		return AxisFit{}, fmt.Errorf("reconstruct: turntable axis direction is zero: %w", mesh.ErrDegenerate)
	}
	u := mesh.Normalize(r3.Cross(up, r3.Vec{X: 1}))
	if u == (r3.Vec{}) {
		u = mesh.Normalize(r3.Cross(up, r3.Vec{Y: 1}))
	}
	v := r3.Cross(up, u)
	type prepared struct {
		rot      mesh.Mat3
		ju, jv   r3.Vec // (I − R)u, (I − R)v
		tree     *mesh.KDTree
		from, to *mesh.Cloud
	}
	trees := map[*mesh.Cloud]*mesh.KDTree{}
	var ps []prepared
	for i, pr := range pairs {
		if len(pr.To.Normals) != len(pr.To.Points) {
			return AxisFit{}, fmt.Errorf("reconstruct: turntable alignment %d: the target has no normals", i)
		}
		if len(pr.From.Points) == 0 || len(pr.To.Points) == 0 {
			continue
		}
		tree := trees[pr.To]
		if tree == nil {
			tree = mesh.NewKDTree(pr.To.Points)
			trees[pr.To] = tree
		}
		r := mesh.RotationFromAxisAngle(up, pr.Angle)
		ps = append(ps, prepared{rot: r, ju: r3.Sub(u, r.MulVec(u)), jv: r3.Sub(v, r.MulVec(v)), tree: tree, from: pr.From, to: pr.To})
	}
	if len(ps) == 0 {
		return AxisFit{}, fmt.Errorf("reconstruct: axis estimation needs at least one alignment of non-empty clouds: %w", mesh.ErrDegenerate)
	}
	cosMax := math.Cos(opt.MaxNormalAngle)
	p := guess
	fit := AxisFit{}
	for it := 0; it < opt.Iterations; it++ {
		// Shrink the pairing distance geometrically over the first half.
		f := math.Min(1, float64(it)/math.Max(1, float64(opt.Iterations)/2))
		maxD := opt.MaxDistance * math.Pow(opt.FinalDistance/opt.MaxDistance, f)
		var a00, a01, a11, b0, b1, sse float64
		count := 0
		var nb []mesh.Neighbor
		for _, pv := range ps {
			off := r3.Sub(p, pv.rot.MulVec(p)) // (I − R)p
			useNormals := len(pv.from.Normals) == len(pv.from.Points)
			for i, x := range pv.from.Points {
				q := r3.Add(pv.rot.MulVec(x), off)
				nb = pv.tree.KNearest(q, opt.Neighbours, nb)
				if len(nb) == 0 || nb[0].Dist2 > maxD*maxD {
					continue
				}
				// Pair with the local surface of the target, the mean of
				// its nearest points and normals, not with one noisy point:
				// the nearest of many noisy points is the one whose noise
				// happens to bring it closest, which biases the fit along
				// the noise (the viewing rays).
				var cp, cn r3.Vec
				for _, m := range nb {
					cp = r3.Add(cp, pv.to.Points[m.Index])
					cn = r3.Add(cn, pv.to.Normals[m.Index])
				}
				cp = r3.Scale(1/float64(len(nb)), cp)
				n := mesh.Normalize(cn)
				if n == (r3.Vec{}) || useNormals && r3.Dot(pv.rot.MulVec(pv.from.Normals[i]), n) < cosMax {
					continue
				}
				res := r3.Dot(r3.Sub(q, cp), n)
				gu, gv := r3.Dot(pv.ju, n), r3.Dot(pv.jv, n)
				a00 += gu * gu
				a01 += gu * gv
				a11 += gv * gv
				b0 += gu * res
				b1 += gv * res
				sse += res * res
				count++
			}
		}
		fit.Pairs = count
		fit.Iterations = it + 1
		if count < 10 {
			return fit, fmt.Errorf("reconstruct: turntable views do not overlap (%d pairs within %.1f mm): %w", count, maxD*1000, mesh.ErrDegenerate)
		}
		fit.RMS = math.Sqrt(sse / float64(count))
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
