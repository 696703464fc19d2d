package mesh

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"
)

// TestSymEig3MatchesGonum checks the Jacobi eigen-solver against gonum's
// mat.EigenSym on random symmetric matrices, including repeated and
// near-repeated eigenvalues.
func TestSymEig3MatchesGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for it := 0; it < 2000; it++ {
		var a [3][3]float64
		for i := 0; i < 3; i++ {
			for j := i; j < 3; j++ {
				a[i][j] = rng.NormFloat64()
				a[j][i] = a[i][j]
			}
		}
		if it%10 == 0 { // a flat covariance: two equal large eigenvalues
			a = [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1e-9}}
			r := RotationFromAxisAngle(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: 1}, rng.Float64())
			m := r.Mul(Mat3(a)).Mul(r.T())
			a = [3][3]float64(m)
		}
		vals, vecs := symEig3(a)
		var es mat.EigenSym
		if !es.Factorize(mat.NewSymDense(3, []float64{a[0][0], a[0][1], a[0][2], a[1][0], a[1][1], a[1][2], a[2][0], a[2][1], a[2][2]}), true) {
			t.Fatal("gonum EigenSym failed")
		}
		want := es.Values(nil) // ascending
		// Tolerance: both solvers are backward stable, so eigenvalues
		// agree to a few ulps of the matrix norm (≲ 3 here).
		for k := 0; k < 3; k++ {
			if math.Abs(vals[k]-want[k]) > 1e-12 {
				t.Fatalf("eigenvalue %d: %v, gonum %v", k, vals[k], want[k])
			}
			// A·v = λ·v for our vector (which is what matters when
			// eigenvalues repeat and vectors are not unique).
			v := vecs[k]
			av := Mat3(a).MulVec(v)
			if r3.Norm(r3.Sub(av, r3.Scale(vals[k], v))) > 1e-10 {
				t.Fatalf("A·v ≠ λ·v for eigenvalue %d", k)
			}
			if math.Abs(r3.Norm(v)-1) > 1e-12 {
				t.Fatalf("eigenvector not unit")
			}
		}
		// The smallest eigenvector matches gonum's up to sign when the
		// smallest eigenvalue is well separated.
		if want[1]-want[0] > 1e-3 {
			var ev mat.Dense
			es.VectorsTo(&ev)
			g := r3.Vec{X: ev.At(0, 0), Y: ev.At(1, 0), Z: ev.At(2, 0)}
			if math.Abs(math.Abs(r3.Dot(g, vecs[0]))-1) > 1e-9 {
				t.Fatalf("smallest eigenvector %v, gonum %v", vecs[0], g)
			}
		}
	}
}

// spherePoints returns an even sample of the sphere of radius r: random
// points thinned to spacing s.
func spherePoints(r, s float64, seed uint64) []r3.Vec {
	rng := rand.New(rand.NewPCG(seed, 3))
	n := int(20 * 4 * math.Pi * r * r / (s * s))
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = r3.Scale(r, Normalize(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}))
	}
	keep, _ := Thin(pts, s)
	out := make([]r3.Vec, len(keep))
	for i, k := range keep {
		out[i] = pts[k]
	}
	return out
}

// TestEstimateNormalsSphere: PCA normals (Hoppe et al. 1992) of an even
// sample of a sphere point radially outward. Tolerance per point,
// derived from the sampling density: the fitted plane's normal points
// from the centre toward the centroid of the neighbourhood, which lies
// within the k-th neighbour distance ρ of the point, so the normal is
// within asin(ρ/R) of the radius through it.
func TestEstimateNormalsSphere(t *testing.T) {
	const R, s = 0.05, 0.004
	pts := spherePoints(R, s, 1)
	opt := DefaultNormalOptions()
	normals, err := EstimateNormals(pts, opt)
	if err != nil {
		t.Fatal(err)
	}
	tree := NewKDTree(pts)
	var worst float64
	for i, p := range pts {
		nb := tree.KNearest(p, opt.K+1, nil)
		rho := math.Sqrt(nb[len(nb)-1].Dist2)
		tol := math.Asin(math.Min(1, rho/R))
		c := r3.Dot(normals[i], Normalize(p))
		if c < 0 {
			t.Fatalf("point %d: normal points inward", i)
		}
		a := math.Acos(math.Min(1, c))
		worst = math.Max(worst, a/tol)
		if a > tol {
			t.Fatalf("point %d: normal %.2f° from radial, tolerance %.2f°", i, a*180/math.Pi, tol*180/math.Pi)
		}
	}
	t.Logf("%d points; worst error %.2f of its tolerance", len(pts), worst)
	// Viewpoint orientation: from far above +z every normal faces up-ish
	// toward the viewpoint.
	opt.Orient = OrientViewpoint
	opt.Viewpoint = r3.Vec{Z: 10}
	nv, err := EstimateNormals(pts, opt)
	if err != nil {
		t.Fatal(err)
	}
	for i, p := range pts {
		if r3.Dot(nv[i], r3.Sub(opt.Viewpoint, p)) < 0 {
			t.Fatalf("point %d faces away from the viewpoint", i)
		}
	}
}

// TestEstimateNormalsOrientsClosedSurface: on a closed surface with
// sharp edges (a box sampled by Sample) and on two separate spheres,
// propagation over the k-NN graph turns nearly every normal outward.
// Points near the box's edges and corners have PCA normals up to 45°
// (edges) or 55° (corners) from either face, but their sign still
// follows a neighbour, so at least 99% must face outward.
func TestEstimateNormalsOrientsClosedSurface(t *testing.T) {
	box := boxMesh(r3.Vec{X: 0.06, Y: 0.04, Z: 0.02})
	opt := DefaultSampleOptions()
	opt.Spacing = 0.002
	c, _, err := Sample(box, opt)
	if err != nil {
		t.Fatal(err)
	}
	// Two spheres far apart: two components, each with its own seed.
	far := spherePoints(0.02, 0.002, 5)
	for _, p := range far {
		c.Points = append(c.Points, r3.Add(p, r3.Vec{X: 1}))
		c.Normals = append(c.Normals, Normalize(p))
	}
	normals, err := EstimateNormals(c.Points, DefaultNormalOptions())
	if err != nil {
		t.Fatal(err)
	}
	outward := 0
	for i := range c.Points {
		if r3.Dot(normals[i], c.Normals[i]) > 0 {
			outward++
		}
	}
	frac := float64(outward) / float64(len(c.Points))
	t.Logf("%d of %d normals outward (%.2f%%)", outward, len(c.Points), 100*frac)
	if frac < 0.99 {
		t.Errorf("only %.2f%% outward", 100*frac)
	}
}

// boxMesh returns a closed box centred at the origin with the given
// size, 12 triangles counter-clockwise from outside.
func boxMesh(size r3.Vec) *Mesh {
	h := r3.Scale(0.5, size)
	m := &Mesh{}
	for i := 0; i < 8; i++ {
		v := r3.Vec{X: -h.X, Y: -h.Y, Z: -h.Z}
		if i&1 != 0 {
			v.X = h.X
		}
		if i&2 != 0 {
			v.Y = h.Y
		}
		if i&4 != 0 {
			v.Z = h.Z
		}
		m.Vertices = append(m.Vertices, v)
	}
	quads := [][4]uint32{{0, 2, 3, 1}, {4, 5, 7, 6}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 4, 6, 2}, {1, 3, 7, 5}}
	for _, q := range quads {
		m.Faces = append(m.Faces, Face{q[0], q[1], q[2]}, Face{q[0], q[2], q[3]})
	}
	return m
}

func TestEstimateNormalsErrors(t *testing.T) {
	if _, err := EstimateNormals([]r3.Vec{{}, {X: 1}}, DefaultNormalOptions()); err == nil {
		t.Error("two points: no error")
	}
	if _, err := EstimateNormals(spherePoints(1, 0.3, 1), NormalOptions{K: 1}); err == nil {
		t.Error("K = 1: no error")
	}
	pts := spherePoints(1, 0.3, 1)
	pts = append(pts, r3.Vec{X: math.Inf(1)})
	n, err := EstimateNormals(pts, DefaultNormalOptions())
	if err != nil {
		t.Fatal(err)
	}
	if n[len(n)-1] != (r3.Vec{}) {
		t.Error("non-finite point got a normal")
	}
}

// TestDepthCloud renders a sphere in front of a tilted plane by ray
// casting and checks the cloud: points on the surfaces, normals toward
// the camera and along the true normals (sphere: radial; plane: its
// normal) away from the silhouette, and the spacing.
func TestDepthCloud(t *testing.T) {
	intr := Intrinsics{Width: 160, Height: 120, Fx: 140, Fy: 140, Cx: 79.5, Cy: 59.5}
	centre := r3.Vec{Z: 0.5}
	const R = 0.08
	pn := Normalize(r3.Vec{X: 0.3, Y: -0.2, Z: -1}) // plane normal, facing the camera
	pd := r3.Dot(pn, r3.Vec{Z: 0.8})                // plane through (0, 0, 0.8)
	depth := make([]float32, intr.Width*intr.Height)
	which := make([]int, len(depth)) // 1 sphere, 2 plane
	for v := 0; v < intr.Height; v++ {
		for u := 0; u < intr.Width; u++ {
			d := intr.Ray(float64(u), float64(v)) // z = 1
			// Sphere: |t·d − c|² = R².
			a, b, c := r3.Dot(d, d), -2*r3.Dot(d, centre), r3.Dot(centre, centre)-R*R
			if disc := b*b - 4*a*c; disc >= 0 {
				depth[v*intr.Width+u] = float32((-b - math.Sqrt(disc)) / (2 * a))
				which[v*intr.Width+u] = 1
				continue
			}
			depth[v*intr.Width+u] = float32(pd / r3.Dot(pn, d))
			which[v*intr.Width+u] = 2
		}
	}
	opt := DefaultDepthCloudOptions()
	opt.Spacing = 0.01
	c, err := DepthCloud(depth, intr, nil, nil, opt)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Points) < 100 {
		t.Fatalf("%d points", len(c.Points))
	}
	nn := nnDistances(c.Points)
	var good, checked int
	for i, p := range c.Points {
		if nn[i] < opt.Spacing*(1-1e-9) {
			t.Fatalf("points %.4g apart, spacing %v", nn[i], opt.Spacing)
		}
		if r3.Dot(c.Normals[i], p) > 0 {
			t.Fatalf("normal %d faces away from the camera", i)
		}
		// Reference normal: whichever surface the point is on (float32
		// depth: within 1e-6 m).
		var ref r3.Vec
		switch {
		case math.Abs(r3.Norm(r3.Sub(p, centre))-R) < 1e-5:
			ref = Normalize(r3.Sub(p, centre))
			// Away from the silhouette only: the window straddles the
			// plane there (6 pixel footprints ≈ 2.5 cm at 0.6 m).
			if r3.Dot(ref, Normalize(r3.Scale(-1, p))) < 0.5 {
				continue
			}
		case math.Abs(r3.Dot(pn, p)-pd) < 1e-5:
			ref = pn
			if r3.Norm(r3.Sub(p, centre)) < R+0.03 {
				continue
			}
		default:
			t.Fatalf("point %v on neither surface", p)
		}
		checked++
		// Tolerance: a 5×5 window spans about 4 pixel footprints
		// (≈ 1.4 cm at 0.5 m); on the sphere of radius 8 cm the PCA
		// normal is within asin(0.7 cm / 8 cm) ≈ 5° of the centre's
		// radius (see TestEstimateNormalsSphere); float32 depth adds
		// far less.
		if a := math.Acos(math.Min(1, r3.Dot(c.Normals[i], ref))); a < 5*math.Pi/180 {
			good++
		}
	}
	t.Logf("%d points, %d checked, %d within 5°", len(c.Points), checked, good)
	if checked < 50 || good != checked {
		t.Errorf("%d of %d normals within 5°", good, checked)
	}
	// Mask and bad sizes.
	mask := make([]bool, len(depth))
	for i := range mask {
		mask[i] = which[i] == 1
	}
	cm, err := DepthCloud(depth, intr, nil, mask, opt)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range cm.Points {
		if math.Abs(r3.Norm(r3.Sub(p, centre))-R) > 1e-5 {
			t.Fatal("masked-out pixel in the cloud")
		}
	}
	if _, err := DepthCloud(depth[1:], intr, nil, nil, opt); err == nil {
		t.Error("short depth: no error")
	}
	if _, err := DepthCloud(depth, intr, make([]RGB, 3), nil, opt); err == nil {
		t.Error("short colours: no error")
	}
}
