package mesh

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"
	"gonum.org/v1/gonum/spatial/transform"
)

func randomPose(rng *rand.Rand, maxAngle, maxShift float64) Pose {
	axis := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
	t := r3.Vec{X: rng.Float64()*2 - 1, Y: rng.Float64()*2 - 1, Z: rng.Float64()*2 - 1}
	return PoseFromAxisAngle(axis, rng.Float64()*maxAngle, r3.Scale(maxShift, t))
}

func randomPoints(rng *rand.Rand, n int, scale float64) []r3.Vec {
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = r3.Vec{X: rng.NormFloat64() * scale, Y: rng.NormFloat64() * scale, Z: rng.NormFloat64() * scale}
	}
	return pts
}

func toDense(pts []r3.Vec) *mat.Dense {
	d := mat.NewDense(len(pts), 3, nil)
	for i, p := range pts {
		d.SetRow(i, []float64{p.X, p.Y, p.Z})
	}
	return d
}

// TestFitSimilarityMatchesGonum checks our closed-form fit against
// gonum's spatial/transform.UmeyamaTransform (a general-purpose reference
// implementation of Umeyama 1991) on noisy correspondences.
func TestFitSimilarityMatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := 0; trial < 20; trial++ {
		src := randomPoints(rng, 50, 0.05)
		truth := randomPose(rng, math.Pi, 0.5)
		scale := 0.5 + rng.Float64()
		dst := make([]r3.Vec, len(src))
		for i, s := range src {
			d := r3.Add(r3.Scale(scale, truth.R.MulVec(s)), truth.T)
			dst[i] = r3.Add(d, r3.Scale(1e-3, r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}))
		}
		c, p, err := FitSimilarity(src, dst)
		if err != nil {
			t.Fatal(err)
		}
		gc, gr, gt, err := transform.UmeyamaTransform(toDense(src), toDense(dst))
		if err != nil {
			t.Fatal(err)
		}
		// Both solve the same least-squares problem in closed form; they
		// may differ only by rounding in the 3×3 SVD, far below 1e-9.
		if math.Abs(c-gc) > 1e-9 {
			t.Errorf("trial %d: scale %v, gonum %v", trial, c, gc)
		}
		for a := 0; a < 3; a++ {
			for b := 0; b < 3; b++ {
				if d := math.Abs(p.R[a][b] - gr.At(a, b)); d > 1e-9 {
					t.Errorf("trial %d: R[%d][%d] = %v, gonum %v", trial, a, b, p.R[a][b], gr.At(a, b))
				}
			}
		}
		if d := r3.Norm(r3.Sub(p.T, r3.Vec{X: gt.AtVec(0), Y: gt.AtVec(1), Z: gt.AtVec(2)})); d > 1e-9 {
			t.Errorf("trial %d: T differs from gonum by %v", trial, d)
		}
	}
}

func TestFitRigidRecoversMotion(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for trial := 0; trial < 20; trial++ {
		src := randomPoints(rng, 10, 0.1)
		truth := randomPose(rng, math.Pi, 1)
		dst := make([]r3.Vec, len(src))
		for i, s := range src {
			dst[i] = truth.Apply(s)
		}
		p, err := FitRigid(src, dst, nil)
		if err != nil {
			t.Fatal(err)
		}
		// Exact data: only rounding error remains.
		if a := RotationAngle(p, truth); a > 1e-9 {
			t.Errorf("trial %d: rotation off by %v rad", trial, a)
		}
		if d := r3.Norm(r3.Sub(p.T, truth.T)); d > 1e-9 {
			t.Errorf("trial %d: translation off by %v", trial, d)
		}
	}
}

func TestFitRigidNearReflection(t *testing.T) {
	// A planar point set with a 180° rotation: the unconstrained
	// orthogonal solution could be a reflection; Umeyama's correction
	// must keep det R = +1.
	src := []r3.Vec{{X: 1}, {Y: 1}, {X: -1}, {Y: -1}, {X: 0.5, Y: 0.5}}
	truth := PoseFromAxisAngle(r3.Vec{X: 1, Y: 1}, math.Pi, r3.Vec{Z: 2})
	dst := make([]r3.Vec, len(src))
	for i, s := range src {
		dst[i] = truth.Apply(s)
	}
	p, err := FitRigid(src, dst, nil)
	if err != nil {
		t.Fatal(err)
	}
	if d := p.R.Det(); math.Abs(d-1) > 1e-12 {
		t.Fatalf("det R = %v", d)
	}
	for i, s := range src {
		if e := r3.Norm(r3.Sub(p.Apply(s), dst[i])); e > 1e-9 {
			t.Errorf("point %d misfit %v", i, e)
		}
	}
}

func TestFitRigidDegenerate(t *testing.T) {
	for name, src := range map[string][]r3.Vec{
		"two points": {{X: 1}, {X: 2}},
		"collinear":  {{X: 1}, {X: 2}, {X: 3}, {X: 4}},
		"coincident": {{X: 1}, {X: 1}, {X: 1}},
	} {
		if _, err := FitRigid(src, src, nil); !errors.Is(err, ErrDegenerate) {
			t.Errorf("%s: err = %v, want ErrDegenerate", name, err)
		}
	}
	// Zero weights remove points.
	src := []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}, {X: 5}}
	if _, err := FitRigid(src, src, []float64{1, 1, 0, 0}); !errors.Is(err, ErrDegenerate) {
		t.Errorf("weighted to two points: err = %v, want ErrDegenerate", err)
	}
}

// bruteNearest is the obviously right nearest-neighbour oracle.
type bruteNearest []r3.Vec

func (b bruteNearest) Nearest(q r3.Vec) (int, float64) {
	best, bd := -1, math.Inf(1)
	for i, p := range b {
		if d := r3.Norm2(r3.Sub(p, q)); d < bd {
			best, bd = i, d
		}
	}
	return best, bd
}

// boxSurfaceCloud samples the six faces of an axis-aligned box with
// outward normals: a shape that constrains all six degrees of freedom.
func boxSurfaceCloud(rng *rand.Rand, n int, size r3.Vec) *Cloud {
	c := &Cloud{}
	for i := 0; i < n; i++ {
		u, v := rng.Float64()-0.5, rng.Float64()-0.5
		var p, nrm r3.Vec
		switch i % 6 {
		case 0:
			p, nrm = r3.Vec{X: size.X / 2, Y: u * size.Y, Z: v * size.Z}, r3.Vec{X: 1}
		case 1:
			p, nrm = r3.Vec{X: -size.X / 2, Y: u * size.Y, Z: v * size.Z}, r3.Vec{X: -1}
		case 2:
			p, nrm = r3.Vec{X: u * size.X, Y: size.Y / 2, Z: v * size.Z}, r3.Vec{Y: 1}
		case 3:
			p, nrm = r3.Vec{X: u * size.X, Y: -size.Y / 2, Z: v * size.Z}, r3.Vec{Y: -1}
		case 4:
			p, nrm = r3.Vec{X: u * size.X, Y: v * size.Y, Z: size.Z / 2}, r3.Vec{Z: 1}
		default:
			p, nrm = r3.Vec{X: u * size.X, Y: v * size.Y, Z: -size.Z / 2}, r3.Vec{Z: -1}
		}
		c.Points = append(c.Points, p)
		c.Normals = append(c.Normals, nrm)
	}
	return c
}

// TestICPMatchesClosedForm moves a cloud by a known small rigid motion
// and checks that ICP (from the identity), with the point-to-plane
// objective and with the symmetric one (Rusinkiewicz 2019), lands on
// the same pose as the closed-form Umeyama (1991) solution on the true
// correspondences, computed by gonum's spatial/transform.
func TestICPMatchesClosedForm(t *testing.T) {
	for _, tc := range []struct {
		name      string
		symmetric bool
		seed      uint64
	}{{"point-to-plane", false, 5}, {"symmetric", true, 15}} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(tc.seed, tc.seed+1))
			dst := boxSurfaceCloud(rng, 3000, r3.Vec{X: 0.06, Y: 0.04, Z: 0.03})
			for trial := 0; trial < 5; trial++ {
				truth := randomPose(rng, 5*math.Pi/180, 0.003) // src → dst
				src := dst.Transform(truth.Inv())
				opt := DefaultICPOptions()
				opt.Symmetric = tc.symmetric
				res, err := ICPPointToPlane(src, dst, bruteNearest(dst.Points), Identity(), opt)
				if err != nil {
					t.Fatal(err)
				}
				_, gr, gt, err := transform.UmeyamaTransform(toDense(src.Points), toDense(dst.Points))
				if err != nil {
					t.Fatal(err)
				}
				ref := Pose{T: r3.Vec{X: gt.AtVec(0), Y: gt.AtVec(1), Z: gt.AtVec(2)}}
				for a := 0; a < 3; a++ {
					for b := 0; b < 3; b++ {
						ref.R[a][b] = gr.At(a, b)
					}
				}
				// Noise-free data: ICP converges to the exact pose; the
				// residual left is the stop threshold (1e-6 rad, 1e-7 m)
				// plus rounding.
				if a := RotationAngle(res.Pose, ref); a > 1e-5 {
					t.Errorf("trial %d: rotation differs from closed form by %.3g rad", trial, a)
				}
				if d := r3.Norm(r3.Sub(res.Pose.T, ref.T)); d > 1e-6 {
					t.Errorf("trial %d: translation differs from closed form by %.3g m", trial, d)
				}
				if !res.Converged || res.RMS > 1e-6 {
					t.Errorf("trial %d: converged=%v rms=%v after %d iterations", trial, res.Converged, res.RMS, res.Iterations)
				}
			}
		})
	}
}

// TestSymmetricResidualOnSphere checks the property the symmetric
// objective is built on (Rusinkiewicz 2019, §3): two points p, q of a
// sphere of radius ρ with their radial normals have (p − q)·(n_p + n_q)
// = (|p−c|² − |q−c|²)/ρ = 0, while the destination plane alone leaves
// (p − q)·n_q = −|p − q|²/(2ρ) (chord geometry: |p − q|² = 2ρ²(1 − cos θ)
// and (p − q)·n_q = ρ(cos θ − 1)).
func TestSymmetricResidualOnSphere(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 18))
	for trial := 0; trial < 20; trial++ {
		rho := 0.005 + 0.05*rng.Float64()
		c := r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: rng.Float64()}
		np := r3.Unit(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()})
		nq := r3.Unit(r3.Add(np, r3.Scale(0.3, r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()})))
		p, q := r3.Add(c, r3.Scale(rho, np)), r3.Add(c, r3.Scale(rho, nq))
		var sym, plain PlaneSystem
		sym.AddSymmetric(p, q, np, nq, 1)
		plain.Add(p, q, nq, 1)
		d2 := r3.Norm2(r3.Sub(p, q))
		want := d2 / (2 * rho)
		// Rounding: the coordinates are of order 1 m, so 1e-15 relative.
		if r := sym.RMS(); r > 1e-13 {
			t.Errorf("trial %d: symmetric residual %.3g m, want 0", trial, r)
		}
		if r := plain.RMS(); math.Abs(r-want) > 1e-12+1e-9*want {
			t.Errorf("trial %d: destination-plane residual %.6g m, want %.6g", trial, r, want)
		}
	}
}

// TestAddSymmetricLinearisation compares the residual of a pair after a
// small motion (p and its normal turned by ω and moved by t, exactly)
// with the first-order prediction r + J·(ω, t) that AddSymmetric's
// normal equations encode: the difference must shrink as the square of
// the motion (common practice for checking a derivative).
func TestAddSymmetricLinearisation(t *testing.T) {
	rng := rand.New(rand.NewPCG(19, 20))
	resid := func(p, q, np, nq r3.Vec) float64 {
		n := r3.Add(np, nq)
		return r3.Dot(r3.Sub(p, q), n) / r3.Norm(n)
	}
	for trial := 0; trial < 20; trial++ {
		rv := func() r3.Vec { return r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()} }
		p, q := rv(), rv()
		np := r3.Unit(rv())
		nq := r3.Unit(r3.Add(np, r3.Scale(0.5, rv())))
		omega, tr := rv(), rv()
		var prevErr float64
		for k, h := range []float64{1e-3, 1e-4} {
			w, dt := r3.Scale(h, omega), r3.Scale(h, tr)
			rot := RotationFromAxisAngle(w, r3.Norm(w))
			exact := resid(r3.Add(rot.MulVec(p), dt), q, rot.MulVec(np), nq)
			// The one-pair system holds JᵀJ and Jᵀr: with J·x and r
			// recovered from them by a unit weight, r + J·x follows.
			var s PlaneSystem
			s.AddSymmetric(p, q, np, nq, 1)
			r0 := resid(p, q, np, nq)
			x := [6]float64{w.X, w.Y, w.Z, dt.X, dt.Y, dt.Z}
			var jx float64
			for u := 0; u < 6; u++ {
				jx += s.b[u] / r0 * x[u] // Jᵀr / r = J for one pair
			}
			e := math.Abs(exact - (r0 + jx))
			if k == 1 && !(e < prevErr/50) {
				t.Errorf("trial %d: first-order error %.3g at h=1e-4 against %.3g at h=1e-3: not quadratic", trial, e, prevErr)
			}
			prevErr = e
		}
	}
}

func TestICPErrors(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	dst := boxSurfaceCloud(rng, 300, r3.Vec{X: 0.06, Y: 0.04, Z: 0.03})
	noNormals := &Cloud{Points: dst.Points}
	if _, err := ICPPointToPlane(dst, noNormals, bruteNearest(dst.Points), Identity(), DefaultICPOptions()); err == nil {
		t.Error("no destination normals: want an error")
	}
	if _, err := ICPPointToPlane(&Cloud{}, dst, bruteNearest(dst.Points), Identity(), DefaultICPOptions()); !errors.Is(err, ErrDegenerate) {
		t.Errorf("empty source: err = %v", err)
	}
	// A flat patch leaves in-plane motion free: the normal equations are
	// singular and ICP must say so rather than return a random slide.
	plane := &Cloud{}
	for i := 0; i < 200; i++ {
		plane.Points = append(plane.Points, r3.Vec{X: rng.Float64() * 0.1, Y: rng.Float64() * 0.1})
		plane.Normals = append(plane.Normals, r3.Vec{Z: 1})
	}
	if _, err := ICPPointToPlane(plane, plane, bruteNearest(plane.Points), Identity(), DefaultICPOptions()); !errors.Is(err, ErrDegenerate) {
		t.Errorf("plane: err = %v, want ErrDegenerate", err)
	}
	// The symmetric objective needs the source's normals.
	sym := DefaultICPOptions()
	sym.Symmetric = true
	if _, err := ICPPointToPlane(noNormals, dst, bruteNearest(dst.Points), Identity(), sym); err == nil {
		t.Error("symmetric without source normals: want an error")
	}
	// Far away: no pairs.
	far := dst.Transform(PoseFromAxisAngle(r3.Vec{Z: 1}, 0, r3.Vec{X: 1}))
	if _, err := ICPPointToPlane(far, dst, bruteNearest(dst.Points), Identity(), DefaultICPOptions()); !errors.Is(err, ErrDegenerate) {
		t.Errorf("no pairs: err = %v", err)
	}
}

// BenchmarkICPPointToPlane aligns ≈2,000 points displaced by a small
// motion against a 5,000-point target through the k-d tree.
func BenchmarkICPPointToPlane(b *testing.B) { benchICP(b, false) }

// BenchmarkICPSymmetric is BenchmarkICPPointToPlane with the symmetric
// objective (ICPOptions.Symmetric).
func BenchmarkICPSymmetric(b *testing.B) { benchICP(b, true) }

func benchICP(b *testing.B, symmetric bool) {
	rng := rand.New(rand.NewPCG(9, 10))
	dst := boxSurfaceCloud(rng, 5000, r3.Vec{X: 0.06, Y: 0.04, Z: 0.03})
	src := boxSurfaceCloud(rng, 2000, r3.Vec{X: 0.06, Y: 0.04, Z: 0.03})
	src = src.Transform(PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 3*math.Pi/180, r3.Vec{X: 0.002, Y: -0.001}))
	tree := NewKDTree(dst.Points)
	opt := DefaultICPOptions()
	opt.Symmetric = symmetric
	b.ResetTimer()
	var res ICPResult
	for i := 0; i < b.N; i++ {
		var err error
		res, err = ICPPointToPlane(src, dst, tree, Identity(), opt)
		if err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(res.Iterations), "iterations")
}

// TestAddGradientRecoversMotion: residuals rᵢ = cᵢ·(T pᵢ) − cᵢ·(T* pᵢ),
// each a linear field with its own gradient cᵢ (the form an image's
// intensity takes near a pixel), pin all six degrees of freedom; Gauss–
// Newton steps through AddGradient converge to the true motion T*
// (exactly, for linear fields, up to the small-angle linearisation that
// repeated steps remove). Checked against the motion that made the data.
func TestAddGradientRecoversMotion(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	truth := PoseFromAxisAngle(r3.Vec{X: 0.3, Y: -0.5, Z: 0.8}, 0.02, r3.Vec{X: 0.004, Y: -0.003, Z: 0.002})
	var ps, cs []r3.Vec
	var ys []float64
	for i := 0; i < 200; i++ {
		p := r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: 1 + rng.Float64()}
		c := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		ps, cs = append(ps, p), append(cs, c)
		ys = append(ys, r3.Dot(c, truth.Apply(p)))
	}
	pose := Identity()
	for it := 0; it < 10; it++ {
		var s PlaneSystem
		for i, p := range ps {
			q := pose.Apply(p)
			s.AddGradient(q, cs[i], r3.Dot(cs[i], q)-ys[i], 1)
		}
		st, _, _, ok := s.Step(0)
		if !ok {
			t.Fatal("singular system")
		}
		pose = st.Mul(pose)
	}
	if d := r3.Norm(r3.Sub(pose.T, truth.T)); d > 1e-9 || RotationAngle(pose, truth) > 1e-9 {
		t.Errorf("recovered %v, want %v (%.2g m, %.2g rad off)", pose, truth, d, RotationAngle(pose, truth))
	}
}

// TestPlaneSystemAddOrder checks the written-out accumulation against
// the loop over the Jacobian row it replaced, to the bit: the same
// products summed in the same order (tracking results must not move
// with a speed change), and the normal matrix against JᵀWJ summed by
// gonum's mat (a reference library) within rounding.
func TestPlaneSystemAddOrder(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	var s PlaneSystem
	var a [21]float64
	var b [6]float64
	jtj := mat.NewSymDense(6, nil)
	for i := 0; i < 500; i++ {
		c := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		n := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		r, w := rng.NormFloat64()*1e-3, rng.Float64()
		s.add(r, c, n, w)
		jr := [6]float64{c.X, c.Y, c.Z, n.X, n.Y, n.Z}
		k := 0
		for u := 0; u < 6; u++ {
			wu := w * jr[u]
			for v := u; v < 6; v++ {
				a[k] += wu * jr[v]
				k++
			}
			b[u] += wu * r
		}
		jtj.SymRankOne(jtj, w, mat.NewVecDense(6, jr[:]))
	}
	if s.a != a || s.b != b {
		t.Fatalf("written-out sums differ from the loop's:\n%v\n%v\n%v\n%v", s.a, a, s.b, b)
	}
	nm := s.Normal()
	for u := 0; u < 6; u++ {
		for v := 0; v < 6; v++ {
			if d := math.Abs(nm[u][v] - jtj.At(u, v)); d > 1e-9*math.Max(1, math.Abs(jtj.At(u, v))) {
				t.Fatalf("normal matrix (%d,%d) = %g, gonum SymRankOne sums %g", u, v, nm[u][v], jtj.At(u, v))
			}
		}
	}
}

// BenchmarkPlaneSystemAdd times one pair's accumulation, which tracking
// runs for every pixel pair of every iteration.
func BenchmarkPlaneSystemAdd(b *testing.B) {
	rng := rand.New(rand.NewPCG(3, 4))
	ps := randomPoints(rng, 1024, 0.2)
	var s PlaneSystem
	n := r3.Unit(r3.Vec{X: 0.3, Y: -0.2, Z: 1})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		p := ps[i&1023]
		s.Add(p, r3.Vec{}, n, 1)
	}
	if s.Pairs != b.N {
		b.Fatal(s.Pairs)
	}
}
