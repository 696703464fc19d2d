package mesh

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
)

// FitRigid returns the rigid pose P minimising Σ wᵢ‖P·srcᵢ − dstᵢ‖²
// in closed form: the SVD method of Kabsch (1976, Acta Cryst. A32,
// DOI 10.1107/S0567739476001873) with the reflection correction of
// Umeyama (1991, IEEE TPAMI 13(4), DOI 10.1109/34.88573). weights may be
// nil (all ones). It returns an error wrapping ErrDegenerate when fewer
// than three points carry weight or they are collinear, because the
// rotation about their line is then undetermined.
func FitRigid(src, dst []r3.Vec, weights []float64) (Pose, error) {
	_, p, err := fit(src, dst, weights, false)
	return p, err
}

// FitSimilarity returns the scale c and rigid pose P minimising
// Σ‖c·R·srcᵢ + T − dstᵢ‖² (Umeyama 1991, Theorem and eq. 40–42); the
// returned pose maps x to c·R·x + T only when its R is multiplied by c,
// so it is given separately: dst ≈ c·P.R·src + P.T.
func FitSimilarity(src, dst []r3.Vec) (scale float64, p Pose, err error) {
	return fit(src, dst, nil, true)
}

func fit(src, dst []r3.Vec, w []float64, withScale bool) (float64, Pose, error) {
	if len(src) != len(dst) {
		panic(fmt.Sprintf("mesh: fit with %d source and %d destination points", len(src), len(dst)))
	}
	if w != nil && len(w) != len(src) {
		panic(fmt.Sprintf("mesh: fit with %d weights for %d points", len(w), len(src)))
	}
	weight := func(i int) float64 {
		if w == nil {
			return 1
		}
		return w[i]
	}
	var sw float64
	var ms, md r3.Vec
	n := 0
	for i := range src {
		wi := weight(i)
		if !(wi > 0) {
			continue
		}
		n++
		sw += wi
		ms = r3.Add(ms, r3.Scale(wi, src[i]))
		md = r3.Add(md, r3.Scale(wi, dst[i]))
	}
	if n < 3 {
		return 0, Pose{}, fmt.Errorf("mesh: rigid fit needs 3 weighted point pairs, have %d: %w", n, ErrDegenerate)
	}
	ms = r3.Scale(1/sw, ms)
	md = r3.Scale(1/sw, md)
	// Cross-covariance Σ = (1/Σw) Σ wᵢ (dᵢ − μd)(sᵢ − μs)ᵀ, and the
	// source variance σ² for the scale.
	var cov [9]float64
	var varS float64
	for i := range src {
		wi := weight(i)
		if !(wi > 0) {
			continue
		}
		s := r3.Sub(src[i], ms)
		d := r3.Sub(dst[i], md)
		varS += wi * r3.Dot(s, s)
		dv := [3]float64{d.X, d.Y, d.Z}
		sv := [3]float64{s.X, s.Y, s.Z}
		for a := 0; a < 3; a++ {
			for b := 0; b < 3; b++ {
				cov[3*a+b] += wi * dv[a] * sv[b]
			}
		}
	}
	for k := range cov {
		cov[k] /= sw
	}
	varS /= sw
	var svd mat.SVD
	if !svd.Factorize(mat.NewDense(3, 3, cov[:]), mat.SVDFull) {
		return 0, Pose{}, fmt.Errorf("mesh: rigid fit: SVD did not converge: %w", ErrDegenerate)
	}
	vals := svd.Values(nil)
	// Rank < 2 means the points are collinear (or coincident): the
	// rotation about their common line is free. Relative to the largest
	// singular value so that the test does not depend on units.
	if vals[0] == 0 || vals[1] <= 1e-12*vals[0] {
		return 0, Pose{}, fmt.Errorf("mesh: rigid fit: points are collinear or coincident: %w", ErrDegenerate)
	}
	var u, v mat.Dense
	svd.UTo(&u)
	svd.VTo(&v)
	s3 := 1.0
	if mat.Det(&u)*mat.Det(&v) < 0 {
		s3 = -1 // Umeyama's S = diag(1, 1, −1): the nearest proper rotation
	}
	var r Mat3
	for a := 0; a < 3; a++ {
		for b := 0; b < 3; b++ {
			r[a][b] = u.At(a, 0)*v.At(b, 0) + u.At(a, 1)*v.At(b, 1) + s3*u.At(a, 2)*v.At(b, 2)
		}
	}
	c := 1.0
	if withScale {
		if varS == 0 {
			return 0, Pose{}, fmt.Errorf("mesh: similarity fit: source points coincide: %w", ErrDegenerate)
		}
		c = (vals[0] + vals[1] + s3*vals[2]) / varS
	}
	t := r3.Sub(md, r3.Scale(c, r.MulVec(ms)))
	return c, Pose{R: r, T: t}, nil
}

// NearestFinder answers nearest-neighbour queries over a fixed point
// set; *KDTree implements it.
type NearestFinder interface {
	Nearest(q r3.Vec) (index int, dist2 float64)
}

// ICPOptions tunes point-to-plane ICP.
type ICPOptions struct {
	// MaxIterations bounds the Gauss–Newton steps.
	// DEFAULT: 30
	MaxIterations int
	// MaxDistance rejects pairs farther apart than this (metres). It must
	// be positive: a few times the expected misalignment plus noise.
	// DEFAULT: 0.01
	MaxDistance float64
	// MaxNormalAngle rejects pairs whose normals differ by more than this
	// (radians) when the source has normals.
	// DEFAULT: π/4
	MaxNormalAngle float64
	// Symmetric measures each pair's residual along the sum of the two
	// points' normals, the source's turned with the pose:
	// r = (R·p + t − q)·N with N = (R·n_p + n_q)/|R·n_p + n_q|, the
	// symmetric objective of Rusinkiewicz (2019, ACM TOG 38(4) 85, DOI
	// 10.1145/3306346.3323037). It vanishes for any two points of a
	// common sphere (and nearly so on a smooth surface), where the
	// destination's plane alone leaves a residual that grows with the
	// points' separation and the surface's curvature; and an error in
	// either cloud's normals, such as a depth image's normals blurred
	// across a crease by their estimation window, tilts N by half as
	// much. The source must have normals.
	// DEFAULT: false
	Symmetric bool
	// HuberDelta is the residual (metres) beyond which a pair's weight
	// falls off as δ/|r| (Huber's M-estimator); 0 gives plain least
	// squares.
	// DEFAULT: 0.002
	HuberDelta float64
	// MinPairs is the fewest accepted pairs with which a step is taken.
	// DEFAULT: 6
	MinPairs int
	// Damping adds Damping·Σw to the diagonal of each step's normal
	// matrix (Tikhonov), in the centred coordinates scaled by the source's
	// RMS radius: a view that leaves some motion free (a flat face, a
	// symmetric part) still refines the rest instead of failing. 0
	// refuses such a view with an error wrapping ErrDegenerate.
	// DEFAULT: 0
	Damping float64
	// StopRotation and StopTranslation end the iteration when a step
	// moves less than both (radians, metres).
	// DEFAULT: 1e-6 rad, 1e-7 m
	StopRotation, StopTranslation float64
}

// DefaultICPOptions returns the documented defaults.
func DefaultICPOptions() ICPOptions {
	return ICPOptions{
		MaxIterations:   30,
		MaxDistance:     0.01,
		MaxNormalAngle:  math.Pi / 4,
		HuberDelta:      0.002,
		MinPairs:        6,
		StopRotation:    1e-6,
		StopTranslation: 1e-7,
	}
}

// ICPResult is the outcome of an ICP run.
type ICPResult struct {
	Pose        Pose    // the refined source-to-destination pose
	Iterations  int     // steps taken
	Pairs       int     // pairs accepted in the last step
	InlierRatio float64 // Pairs over the source points considered
	RMS         float64 // root-mean-square point-to-plane residual of the accepted pairs (metres)
	Converged   bool    // the last step was below the stop thresholds
}

// PlaneSystem accumulates the normal equations of one step of
// point-to-plane alignment linearised for small motions (Low 2004, UNC
// TR04-004): for a moved point p paired with a destination point q of
// normal n, the residual (p − q)·n changes by ω·(p × n) + t·n under a
// small rotation ω about the origin and a translation t. The zero value
// is empty and ready; systems built in parallel over parts of the data
// are combined with Merge (in a fixed order, for deterministic sums).
type PlaneSystem struct {
	a [21]float64 // upper triangle of JᵀWJ, row-major
	b [6]float64  // JᵀWr
	// SSE and W are the weighted sum of squared residuals and of weights;
	// Pairs counts the pairs added.
	SSE, W float64
	Pairs  int
}

// Add adds the pair (p, q) with destination normal n and weight w.
func (s *PlaneSystem) Add(p, q, n r3.Vec, w float64) {
	s.add(r3.Dot(r3.Sub(p, q), n), r3.Cross(p, n), n, w)
}

// AddGradient adds a residual r that depends on a moved point p only,
// with gradient g = ∂r/∂p (world frame) and weight w: its row of the
// Jacobian in the system's motion (rotation about the origin, then
// translation) is (p × g, g). Add(p, q, n, w) is AddGradient(p, n,
// (p − q)·n, w); other residuals (an image's intensity at the point's
// projection, say) enter the same system through it.
func (s *PlaneSystem) AddGradient(p, g r3.Vec, r, w float64) {
	s.add(r, r3.Cross(p, g), g, w)
}

// add adds a residual r with Jacobian row (c, n) and weight w. It is
// written out term by term (the row-major upper triangle of JᵀWJ, then
// JᵀWr): the loop it replaces, over an index into a, cost twice as much
// in tracking, where it runs for every pixel pair of every iteration;
// each entry is the same product added in the same order, so the sums
// are identical to the bit (TestPlaneSystemAddOrder).
func (s *PlaneSystem) add(r float64, c, n r3.Vec, w float64) {
	j := [6]float64{c.X, c.Y, c.Z, n.X, n.Y, n.Z}
	a := &s.a
	wu := w * j[0]
	a[0] += wu * j[0]
	a[1] += wu * j[1]
	a[2] += wu * j[2]
	a[3] += wu * j[3]
	a[4] += wu * j[4]
	a[5] += wu * j[5]
	s.b[0] += wu * r
	wu = w * j[1]
	a[6] += wu * j[1]
	a[7] += wu * j[2]
	a[8] += wu * j[3]
	a[9] += wu * j[4]
	a[10] += wu * j[5]
	s.b[1] += wu * r
	wu = w * j[2]
	a[11] += wu * j[2]
	a[12] += wu * j[3]
	a[13] += wu * j[4]
	a[14] += wu * j[5]
	s.b[2] += wu * r
	wu = w * j[3]
	a[15] += wu * j[3]
	a[16] += wu * j[4]
	a[17] += wu * j[5]
	s.b[3] += wu * r
	wu = w * j[4]
	a[18] += wu * j[4]
	a[19] += wu * j[5]
	s.b[4] += wu * r
	wu = w * j[5]
	a[20] += wu * j[5]
	s.b[5] += wu * r
	s.SSE += w * r * r
	s.W += w
	s.Pairs++
}

// AddSymmetric adds the pair (p, q) with normals np (of the moved
// source point, which turns with the motion) and nq under the symmetric
// objective (ICPOptions.Symmetric): r = (p − q)·N/|N| with N = np + nq,
// a distance. Under a small rotation ω (about the origin) and
// translation t, p and np turn, so (p − q)·N changes by
// ω·(p × N) + ω·(np × (p − q)) + t·N = ω·(p × nq + q × np) + t·N, and
// |N| by ω·(np × nq)/|N|, to first order; hence the Jacobian row
// ((p × nq + q × np − r·(np × nq)/|N|)/|N|, N/|N|). It does nothing when
// the normals are opposite (N = 0).
func (s *PlaneSystem) AddSymmetric(p, q, np, nq r3.Vec, w float64) {
	n := r3.Add(np, nq)
	l := r3.Norm(n)
	if !(l > 1e-9) {
		return
	}
	k := 1 / l
	r := k * r3.Dot(r3.Sub(p, q), n)
	c := r3.Sub(r3.Add(r3.Cross(p, nq), r3.Cross(q, np)), r3.Scale(r*k, r3.Cross(np, nq)))
	s.add(r, r3.Scale(k, c), r3.Scale(k, n), w)
}

// Merge adds o's sums to s.
func (s *PlaneSystem) Merge(o *PlaneSystem) {
	for k := range s.a {
		s.a[k] += o.a[k]
	}
	for k := range s.b {
		s.b[k] += o.b[k]
	}
	s.SSE += o.SSE
	s.W += o.W
	s.Pairs += o.Pairs
}

// Normal returns the system's normal matrix JᵀWJ in full: the
// information the pairs carry about the six motion parameters (rotation
// about the origin, then translation), for weighing this alignment
// against others (a pose graph's edge).
func (s *PlaneSystem) Normal() [6][6]float64 {
	var m [6][6]float64
	k := 0
	for u := 0; u < 6; u++ {
		for v := u; v < 6; v++ {
			m[u][v], m[v][u] = s.a[k], s.a[k]
			k++
		}
	}
	return m
}

// RMS returns the weighted root-mean-square residual.
func (s *PlaneSystem) RMS() float64 {
	if s.W == 0 {
		return 0
	}
	return math.Sqrt(s.SSE / s.W)
}

// Step solves the system and returns the small motion that reduces the
// residuals, as a pose to apply after the current one
// (current ← step.Mul(current)), with its rotation angle and translation
// length. damping ≥ 0 adds damping·I to JᵀWJ (Tikhonov regularisation):
// directions the pairs do not constrain then stay put instead of
// wandering with the noise. It reports false when the system is singular.
func (s *PlaneSystem) Step(damping float64) (step Pose, angle, shift float64, ok bool) {
	a := s.a
	if damping > 0 {
		k := 0
		for u := 0; u < 6; u++ {
			a[k] += damping
			k += 6 - u
		}
	}
	return s.solve(a, s.b)
}

// StepToward is Step with the damping pulling toward a prior pose
// instead of toward no motion, scaled per parameter like Marquardt's
// (1963): it minimises the point-to-plane residuals plus
// Σᵤ rel·Aᵤᵤ·(ξᵤ + δᵤ)², where A is the normal matrix, δ the current
// pose's offset from the prior (offset = current·prior⁻¹ as a small
// motion, the same left increment the step is) and ξ the step. Scaling
// by Aᵤᵤ makes rel free of units and lever arms: the directions the
// pairs constrain move by a fraction rel less than they would, and those
// they leave loose (a camera sliding over a large table while the part
// is small) stay near the prior, a motion model's prediction, instead of
// drifting with the noise.
func (s *PlaneSystem) StepToward(rel float64, offset Pose) (step Pose, angle, shift float64, ok bool) {
	a, b := s.a, s.b
	if rel > 0 {
		axis, ang := offset.AxisAngle()
		d := [6]float64{axis.X * ang, axis.Y * ang, axis.Z * ang, offset.T.X, offset.T.Y, offset.T.Z}
		k := 0
		for u := 0; u < 6; u++ {
			l := rel * s.a[k]
			a[k] += l
			b[u] += l * d[u]
			k += 6 - u
		}
	}
	return s.solve(a, b)
}

func (s *PlaneSystem) solve(a [21]float64, b [6]float64) (step Pose, angle, shift float64, ok bool) {
	x, ok := solve6(a, b)
	if !ok {
		return Identity(), 0, 0, false
	}
	omega := r3.Vec{X: -x[0], Y: -x[1], Z: -x[2]}
	dt := r3.Vec{X: -x[3], Y: -x[4], Z: -x[5]}
	angle = r3.Norm(omega)
	return Pose{R: RotationFromAxisAngle(omega, angle), T: dt}, angle, r3.Norm(dt), true
}

// ICPPointToPlane refines init, a pose mapping src into the frame of dst,
// by point-to-plane ICP (Chen & Medioni 1992, DOI
// 10.1016/0262-8856(92)90066-C) with the small-angle linearisation of
// Low (2004): each step minimises Σ wᵢ((R·pᵢ + t − qᵢ)·nᵢ)² (PlaneSystem)
// with qᵢ the nearest destination point and nᵢ its normal. dst must have
// normals; near is a nearest-neighbour index over dst.Points
// (NewKDTree(dst.Points)). Pairs farther than MaxDistance, or whose
// normals (when src has them) differ by more than MaxNormalAngle, are
// rejected. The pairing runs in parallel over fixed slices of src whose
// sums are merged in order, so the result does not depend on timing.
func ICPPointToPlane(src, dst *Cloud, near NearestFinder, init Pose, opt ICPOptions) (ICPResult, error) {
	if len(dst.Normals) != len(dst.Points) {
		return ICPResult{}, fmt.Errorf("mesh: point-to-plane ICP needs destination normals (%d for %d points)", len(dst.Normals), len(dst.Points))
	}
	if len(src.Points) == 0 || len(dst.Points) == 0 {
		return ICPResult{}, fmt.Errorf("mesh: ICP on an empty cloud: %w", ErrDegenerate)
	}
	if !(opt.MaxDistance > 0) {
		return ICPResult{}, fmt.Errorf("mesh: ICP MaxDistance must be positive, is %v", opt.MaxDistance)
	}
	// The system is built in coordinates centred on the moved source
	// centroid and scaled by the source's RMS radius, so that rotation
	// and translation have comparable units (the solution is the same;
	// the conditioning, and the meaning of Damping, are not).
	var centroid r3.Vec
	for _, p := range src.Points {
		centroid = r3.Add(centroid, p)
	}
	centroid = r3.Scale(1/float64(len(src.Points)), centroid)
	var rad2 float64
	for _, p := range src.Points {
		rad2 += r3.Norm2(r3.Sub(p, centroid))
	}
	scale := math.Sqrt(rad2 / float64(len(src.Points)))
	if !(scale > 0) {
		return ICPResult{}, fmt.Errorf("mesh: ICP source points coincide: %w", ErrDegenerate)
	}
	inv := 1 / scale
	useNormals := len(src.Normals) == len(src.Points)
	if opt.Symmetric && !useNormals {
		return ICPResult{}, fmt.Errorf("mesh: symmetric point-to-plane ICP needs source normals (%d for %d points)", len(src.Normals), len(src.Points))
	}
	cosMax := math.Cos(opt.MaxNormalAngle)
	maxD2 := opt.MaxDistance * opt.MaxDistance
	// A finder that can bound its search (KDTree.NearestWithin) gives
	// the same pairs faster.
	bounded, _ := near.(interface {
		NearestWithin(q r3.Vec, maxD2 float64) (int, float64)
	})
	pose := init
	res := ICPResult{Pose: pose}
	// Fixed slices: the same partition whatever GOMAXPROCS is, so the
	// floating-point sums are always added in the same order.
	const slice = 512
	parts := make([]PlaneSystem, (len(src.Points)+slice-1)/slice)
	for it := 0; it < opt.MaxIterations; it++ {
		c := pose.Apply(centroid)
		par.For(len(parts), 0, func(k int) {
			sys := &parts[k]
			*sys = PlaneSystem{}
			for i := k * slice; i < min((k+1)*slice, len(src.Points)); i++ {
				p := pose.Apply(src.Points[i])
				var j int
				var d2 float64
				if bounded != nil {
					j, d2 = bounded.NearestWithin(p, maxD2)
				} else {
					j, d2 = near.Nearest(p)
				}
				if j < 0 || d2 > maxD2 {
					continue
				}
				n := dst.Normals[j]
				var ns r3.Vec // the moved source normal
				if useNormals {
					ns = pose.Rotate(src.Normals[i])
					if r3.Dot(ns, n) < cosMax {
						continue
					}
				}
				q := dst.Points[j]
				w := 1.0
				if opt.HuberDelta > 0 {
					d := r3.Sub(p, q)
					r := math.Abs(r3.Dot(d, n))
					if opt.Symmetric {
						r = math.Abs(r3.Dot(d, r3.Add(ns, n))) / r3.Norm(r3.Add(ns, n))
					}
					if r > opt.HuberDelta {
						w = opt.HuberDelta / r
					}
				}
				pc, qc := r3.Scale(inv, r3.Sub(p, c)), r3.Scale(inv, r3.Sub(q, c))
				if opt.Symmetric {
					sys.AddSymmetric(pc, qc, ns, n, w)
				} else {
					sys.Add(pc, qc, n, w)
				}
			}
		})
		var sys PlaneSystem
		for k := range parts {
			sys.Merge(&parts[k])
		}
		res.Pairs = sys.Pairs
		res.InlierRatio = float64(sys.Pairs) / float64(len(src.Points))
		res.RMS = sys.RMS() * scale
		if sys.Pairs < opt.MinPairs {
			return res, fmt.Errorf("mesh: ICP step %d found %d pairs within %.4g m, need %d: %w", it+1, sys.Pairs, opt.MaxDistance, opt.MinPairs, ErrDegenerate)
		}
		step, angle, _, ok := sys.Step(opt.Damping * sys.W)
		if !ok {
			return res, fmt.Errorf("mesh: ICP step %d: the pairs do not constrain all six degrees of freedom: %w", it+1, ErrDegenerate)
		}
		// The step acts on the centred, scaled coordinates:
		// x ↦ c + s·(R·(x − c)/s + t) = R·x + (c − R·c + s·t).
		shift := scale * r3.Norm(step.T)
		full := Pose{R: step.R, T: r3.Add(r3.Sub(c, step.R.MulVec(c)), r3.Scale(scale, step.T))}
		pose = full.Mul(pose).Orthonormalize()
		res.Pose = pose
		res.Iterations = it + 1
		if angle < opt.StopRotation && shift < opt.StopTranslation {
			res.Converged = true
			break
		}
	}
	return res, nil
}

// solve6 solves the symmetric 6×6 system A·x = b, A given by its upper
// triangle in row-major order, by Cholesky factorisation. It reports
// false when A is not positive definite to working precision (a rank-
// deficient constraint set, such as a plane that leaves in-plane motion
// free).
func solve6(ut [21]float64, b [6]float64) ([6]float64, bool) {
	var a [6][6]float64
	k := 0
	for u := 0; u < 6; u++ {
		for v := u; v < 6; v++ {
			a[u][v] = ut[k]
			a[v][u] = ut[k]
			k++
		}
	}
	var maxDiag float64
	for i := 0; i < 6; i++ {
		maxDiag = math.Max(maxDiag, a[i][i])
	}
	var l [6][6]float64
	for i := 0; i < 6; i++ {
		for j := 0; j <= i; j++ {
			s := a[i][j]
			for m := 0; m < j; m++ {
				s -= l[i][m] * l[j][m]
			}
			if i == j {
				// A pivot this small relative to the largest diagonal
				// entry means a direction the data does not constrain.
				if s <= 1e-12*maxDiag {
					return [6]float64{}, false
				}
				l[i][i] = math.Sqrt(s)
			} else {
				l[i][j] = s / l[j][j]
			}
		}
	}
	var y, x [6]float64
	for i := 0; i < 6; i++ {
		s := b[i]
		for m := 0; m < i; m++ {
			s -= l[i][m] * y[m]
		}
		y[i] = s / l[i][i]
	}
	for i := 5; i >= 0; i-- {
		s := y[i]
		for m := i + 1; m < 6; m++ {
			s -= l[m][i] * x[m]
		}
		x[i] = s / l[i][i]
	}
	return x, true
}
