package validate

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// ---------------------------------------------------------------------
// Test meshes (invented geometry: exact solids whose areas are handbook
// values).
// ---------------------------------------------------------------------

// tstBox returns the closed box [−a/2, a/2]×[−b/2, b/2]×[−c/2, c/2]
// with each face split into n×n squares of two triangles, welded and
// wound outward. Its area is 2(ab + bc + ca) (handbook).
func tstBox(a, b, c float64, n int) *mesh.Mesh {
	m := &mesh.Mesh{}
	half := r3.Vec{X: a / 2, Y: b / 2, Z: c / 2}
	// Each face: origin corner o and two edge vectors u, v with u×v
	// pointing outward.
	type face struct{ o, u, v r3.Vec }
	faces := []face{
		{r3.Vec{X: -half.X, Y: -half.Y, Z: half.Z}, r3.Vec{X: a}, r3.Vec{Y: b}},  // +z
		{r3.Vec{X: -half.X, Y: -half.Y, Z: -half.Z}, r3.Vec{Y: b}, r3.Vec{X: a}}, // −z
		{r3.Vec{X: half.X, Y: -half.Y, Z: -half.Z}, r3.Vec{Y: b}, r3.Vec{Z: c}},  // +x
		{r3.Vec{X: -half.X, Y: -half.Y, Z: -half.Z}, r3.Vec{Z: c}, r3.Vec{Y: b}}, // −x
		{r3.Vec{X: -half.X, Y: half.Y, Z: -half.Z}, r3.Vec{Z: c}, r3.Vec{X: a}},  // +y
		{r3.Vec{X: -half.X, Y: -half.Y, Z: -half.Z}, r3.Vec{X: a}, r3.Vec{Z: c}}, // −y
	}
	for _, f := range faces {
		base := uint32(len(m.Vertices))
		for j := 0; j <= n; j++ {
			for i := 0; i <= n; i++ {
				m.Vertices = append(m.Vertices, r3.Add(f.o, r3.Add(r3.Scale(float64(i)/float64(n), f.u), r3.Scale(float64(j)/float64(n), f.v))))
			}
		}
		at := func(i, j int) uint32 { return base + uint32(j*(n+1)+i) }
		for j := 0; j < n; j++ {
			for i := 0; i < n; i++ {
				m.Faces = append(m.Faces, mesh.Face{at(i, j), at(i+1, j), at(i+1, j+1)}, mesh.Face{at(i, j), at(i+1, j+1), at(i, j+1)})
			}
		}
	}
	m.WeldVertices(1e-9 * (a + b + c))
	return m
}

// tstIcosphere returns an icosahedron subdivided levels times with its
// vertices pushed onto the sphere of radius r about the origin.
func tstIcosphere(r float64, levels int) *mesh.Mesh {
	t := (1 + math.Sqrt(5)) / 2
	v := []r3.Vec{{X: -1, Y: t}, {X: 1, Y: t}, {X: -1, Y: -t}, {X: 1, Y: -t},
		{Y: -1, Z: t}, {Y: 1, Z: t}, {Y: -1, Z: -t}, {Y: 1, Z: -t},
		{X: t, Z: -1}, {X: t, Z: 1}, {X: -t, Z: -1}, {X: -t, Z: 1}}
	f := []mesh.Face{{0, 11, 5}, {0, 5, 1}, {0, 1, 7}, {0, 7, 10}, {0, 10, 11}, {1, 5, 9}, {5, 11, 4},
		{11, 10, 2}, {10, 7, 6}, {7, 1, 8}, {3, 9, 4}, {3, 4, 2}, {3, 2, 6}, {3, 6, 8}, {3, 8, 9},
		{4, 9, 5}, {2, 4, 11}, {6, 2, 10}, {8, 6, 7}, {9, 8, 1}}
	for i := range v {
		v[i] = r3.Scale(r, mesh.Normalize(v[i]))
	}
	for l := 0; l < levels; l++ {
		mid := map[[2]uint32]uint32{}
		get := func(a, b uint32) uint32 {
			k := [2]uint32{min(a, b), max(a, b)}
			if i, ok := mid[k]; ok {
				return i
			}
			v = append(v, r3.Scale(r, mesh.Normalize(r3.Add(v[a], v[b]))))
			mid[k] = uint32(len(v) - 1)
			return mid[k]
		}
		var nf []mesh.Face
		for _, x := range f {
			ab, bc, ca := get(x[0], x[1]), get(x[1], x[2]), get(x[2], x[0])
			nf = append(nf, mesh.Face{x[0], ab, ca}, mesh.Face{x[1], bc, ab}, mesh.Face{x[2], ca, bc}, mesh.Face{ab, bc, ca})
		}
		f = nf
	}
	return &mesh.Mesh{Vertices: v, Faces: f}
}

var tstPartCache sync.Map // "name@spacing" → *tstPartMesh

type tstPartMesh struct {
	once sync.Once
	m    *mesh.Mesh
	p    *parts.Part
	err  error
}

// tstPart returns the demo part's surface (parts.Part.Mesh: marching
// cubes on its SDF at the given lattice spacing), cached per name and
// spacing.
func tstPart(t testing.TB, name string, spacing float64) (*mesh.Mesh, *parts.Part) {
	t.Helper()
	v, _ := tstPartCache.LoadOrStore(fmt.Sprintf("%s@%g", name, spacing), &tstPartMesh{})
	pm := v.(*tstPartMesh)
	pm.once.Do(func() {
		pm.p, pm.err = parts.Get(name)
		if pm.err == nil {
			pm.m, pm.err = pm.p.Mesh(spacing)
		}
	})
	if pm.err != nil {
		t.Fatal(pm.err)
	}
	return pm.m, pm.p
}

// ---------------------------------------------------------------------
// Closest point on a triangle
// ---------------------------------------------------------------------

// Hand-worked cases, one per Voronoi region of the right triangle
// a = (0,0,0), b = (1,0,0), c = (0,1,0) (regions as in Ericson 2005,
// §5.1.5, Figure 5.7).
func TestClosestPointOnTriangleRegions(t *testing.T) {
	a, b, c := r3.Vec{}, r3.Vec{X: 1}, r3.Vec{Y: 1}
	cases := []struct {
		p      r3.Vec
		want   r3.Vec
		region TriangleRegion
	}{
		{r3.Vec{X: -1, Y: -1, Z: 0.5}, a, RegionVertexA},
		{r3.Vec{X: 2, Y: -0.5}, b, RegionVertexB},
		{r3.Vec{X: -0.5, Y: 2, Z: 1}, c, RegionVertexC},
		{r3.Vec{X: 0.5, Y: -1, Z: 0.3}, r3.Vec{X: 0.5}, RegionEdgeAB},
		{r3.Vec{X: 1, Y: 1}, r3.Vec{X: 0.5, Y: 0.5}, RegionEdgeBC},
		{r3.Vec{X: -1, Y: 0.5, Z: -2}, r3.Vec{Y: 0.5}, RegionEdgeCA},
		{r3.Vec{X: 0.25, Y: 0.25, Z: 2}, r3.Vec{X: 0.25, Y: 0.25}, RegionFace},
		{r3.Vec{X: 0.1, Y: 0.2, Z: -3}, r3.Vec{X: 0.1, Y: 0.2}, RegionFace},
	}
	for _, tc := range cases {
		got, region := ClosestPointOnTriangle(tc.p, a, b, c)
		// Exact arithmetic on these values: tolerance is rounding only.
		if r3.Norm(r3.Sub(got, tc.want)) > 1e-15 || region != tc.region {
			t.Errorf("ClosestPointOnTriangle(%v) = %v (%v), want %v (%v)", tc.p, got, region, tc.want, tc.region)
		}
	}
}

// tstOracleDistance is the brute-force distance from p to triangle
// (a, b, c): the minimum over a barycentric grid of (n+1)(n+2)/2 points.
// Every point of the triangle lies in a grid sub-triangle similar to the
// whole at scale 1/n, and so within (longest edge)/n of a grid point:
// the oracle overestimates the true distance by at most that.
func tstOracleDistance(p, a, b, c r3.Vec, n int) float64 {
	best := math.Inf(1)
	for i := 0; i <= n; i++ {
		for j := 0; i+j <= n; j++ {
			u, v := float64(i)/float64(n), float64(j)/float64(n)
			q := r3.Add(a, r3.Add(r3.Scale(u, r3.Sub(b, a)), r3.Scale(v, r3.Sub(c, a))))
			best = math.Min(best, r3.Norm(r3.Sub(p, q)))
		}
	}
	return best
}

func TestClosestPointOnTriangleOracle(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	rv := func(s float64) r3.Vec {
		return r3.Vec{X: s * (2*rng.Float64() - 1), Y: s * (2*rng.Float64() - 1), Z: s * (2*rng.Float64() - 1)}
	}
	const n = 200
	seen := map[TriangleRegion]int{}
	for trial := 0; trial < 300; trial++ {
		a, b, c := rv(1), rv(1), rv(1)
		switch trial % 10 {
		case 8: // collinear
			c = r3.Add(a, r3.Scale(0.3, r3.Sub(b, a)))
		case 9: // two corners coincide
			c = b
		}
		p := rv(2)
		q, region := ClosestPointOnTriangle(p, a, b, c)
		seen[region]++
		got := r3.Norm(r3.Sub(p, q))
		oracle := tstOracleDistance(p, a, b, c, n)
		long := math.Max(r3.Norm(r3.Sub(b, a)), math.Max(r3.Norm(r3.Sub(c, b)), r3.Norm(r3.Sub(a, c))))
		// The exact distance can never exceed the oracle's minimum (up to
		// rounding, 1e-12), and the oracle overestimates by at most
		// long/n (see tstOracleDistance).
		if got > oracle+1e-12 || oracle-got > long/n+1e-12 {
			t.Fatalf("trial %d: distance %.9g, oracle %.9g (bound %.3g)", trial, got, oracle, long/n)
		}
		// The returned point lies on the triangle: its distance to the
		// plane is rounding and it is within the triangle's box.
		box := mesh.BoxOf([]r3.Vec{a, b, c})
		if !box.Extend(r3.Add(box.Min, r3.Vec{X: -1e-12, Y: -1e-12, Z: -1e-12})).Extend(r3.Add(box.Max, r3.Vec{X: 1e-12, Y: 1e-12, Z: 1e-12})).Contains(q) {
			t.Fatalf("trial %d: closest point %v outside the triangle's box %v", trial, q, box)
		}
	}
	for r := RegionFace; r <= RegionEdgeCA; r++ {
		if seen[r] == 0 {
			t.Errorf("region %v never hit in 300 random trials", r)
		}
	}
}

// ---------------------------------------------------------------------
// Surface
// ---------------------------------------------------------------------

// The BVH query must give exactly what a scan over every face gives
// (same per-face function, ties by the smaller face index).
func TestSurfaceMatchesBruteForce(t *testing.T) {
	m := tstIcosphere(0.05, 3)
	// Perturb the vertices so that the faces are uneven.
	rng := rand.New(rand.NewPCG(3, 4))
	for i := range m.Vertices {
		m.Vertices[i] = r3.Scale(1+0.2*rng.Float64(), m.Vertices[i])
	}
	s, err := NewSurface(m)
	if err != nil {
		t.Fatal(err)
	}
	for trial := 0; trial < 500; trial++ {
		p := r3.Vec{X: 0.2 * (rng.Float64() - 0.5), Y: 0.2 * (rng.Float64() - 0.5), Z: 0.2 * (rng.Float64() - 0.5)}
		best, bestF := math.Inf(1), -1
		for i, f := range m.Faces {
			q, _ := ClosestPointOnTriangle(p, m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]])
			dx, dy, dz := p.X-q.X, p.Y-q.Y, p.Z-q.Z
			if d := dx*dx + dy*dy + dz*dz; d < best {
				best, bestF = d, i
			}
		}
		got := s.Closest(p)
		if got.Dist != math.Sqrt(best) || got.Face != bestF {
			t.Fatalf("query %v: BVH gives face %d at %.17g, brute force face %d at %.17g", p, got.Face, got.Dist, bestF, math.Sqrt(best))
		}
		// A radius below the distance finds nothing; at it, the same.
		if _, ok := s.ClosestWithin(p, 0.999*got.Dist); ok {
			t.Fatalf("query %v: found a point within 0.999 of the closest distance", p)
		}
		// (The next float up: squaring the rounded square root may lose
		// the last bit.)
		if sp, ok := s.ClosestWithin(p, math.Nextafter(got.Dist, 1)); !ok || sp.Face != got.Face {
			t.Fatalf("query %v: ClosestWithin at the exact distance gives %v, %v", p, sp, ok)
		}
	}
}

// The sign follows inside/outside exactly for a closed box, including
// near edges and corners, where a face normal alone would give the
// wrong sign (Bærentzen & Aanæs 2005, §3).
func TestSurfaceSignedBox(t *testing.T) {
	const a = 0.04
	m := tstBox(a, a, a, 3)
	s, err := NewSurface(m)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	for trial := 0; trial < 3000; trial++ {
		p := r3.Vec{X: a * (1.4*rng.Float64() - 0.7), Y: a * (1.4*rng.Float64() - 0.7), Z: a * (1.4*rng.Float64() - 0.7)}
		if trial%3 == 0 { // near a corner
			p = r3.Add(r3.Vec{X: a / 2, Y: -a / 2, Z: a / 2}, r3.Scale(0.003, r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: rng.Float64() - 0.5}))
		}
		inside := math.Abs(p.X) < a/2 && math.Abs(p.Y) < a/2 && math.Abs(p.Z) < a/2
		// The exact distance to the box surface (handbook: distance to a
		// box from outside is the norm of the clamped excess, from inside
		// the smallest distance to a face).
		var want float64
		if inside {
			want = math.Min(a/2-math.Abs(p.X), math.Min(a/2-math.Abs(p.Y), a/2-math.Abs(p.Z)))
		} else {
			ex := r3.Vec{X: math.Max(0, math.Abs(p.X)-a/2), Y: math.Max(0, math.Abs(p.Y)-a/2), Z: math.Max(0, math.Abs(p.Z)-a/2)}
			want = r3.Norm(ex)
		}
		got := s.Closest(p)
		if want < 1e-12 {
			continue
		}
		// Tolerance: rounding of coordinates of size a (1e-15 relative).
		if math.Abs(got.Dist-want) > 1e-14 || (got.Signed < 0) != inside {
			t.Fatalf("point %v (inside %v): distance %.9g signed %.9g (%v), want %.9g", p, inside, got.Dist, got.Signed, got.Region, want)
		}
	}
}

func TestNewSurfaceDegenerate(t *testing.T) {
	m := &mesh.Mesh{Vertices: []r3.Vec{{}, {X: 1}, {X: 2}}, Faces: []mesh.Face{{0, 1, 2}, {0, 0, 1}}}
	if _, err := NewSurface(m); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("NewSurface(collinear) error %v, want ErrDegenerate", err)
	}
	bad := &mesh.Mesh{Vertices: []r3.Vec{{}}, Faces: []mesh.Face{{0, 1, 2}}}
	if _, err := NewSurface(bad); err == nil {
		t.Error("NewSurface with an index out of range: no error")
	}
	nan := &mesh.Mesh{Vertices: []r3.Vec{{}, {X: 1}, {Y: math.NaN()}}, Faces: []mesh.Face{{0, 1, 2}}}
	if _, err := NewSurface(nan); err == nil {
		t.Error("NewSurface with a NaN vertex: no error")
	}
}

// ---------------------------------------------------------------------
// Scores
// ---------------------------------------------------------------------

// A worked example of the definitions of Knapitsch et al. (2017,
// Tanks and Temples, §5.2): precision and recall as shares of points
// within τ, F = 2PR/(P+R). Distances worked by hand:
//
//	scan (0,0,0)→(0,.3,0) 0.3; (1,0,0)→(1,0,.5) 0.5; (2,0,0)→(3,0,0) 1;
//	(5,0,0)→(3,0,0) 2.  reference (0,.3,0) 0.3; (1,0,.5) 0.5; (3,0,0)→(2,0,0) 1.
func TestPointSetScoresWorkedExample(t *testing.T) {
	scan := []r3.Vec{{}, {X: 1}, {X: 2}, {X: 5}}
	ref := []r3.Vec{{Y: 0.3}, {X: 1, Z: 0.5}, {X: 3}}
	cases := []struct {
		tau, p, r, f float64
	}{
		{0.6, 0.5, 2.0 / 3, 4.0 / 7}, // 2 of 4 and 2 of 3 within 0.6
		{1.0, 0.75, 1, 6.0 / 7},      // a distance equal to τ counts
		{0.1, 0, 0, 0},               // nothing within: F defined as 0
	}
	for _, tc := range cases {
		s, err := PointSetScores(scan, ref, tc.tau)
		if err != nil {
			t.Fatal(err)
		}
		const eps = 1e-15 // rounding of one division
		if math.Abs(s.Precision-tc.p) > eps || math.Abs(s.Recall-tc.r) > eps || math.Abs(s.FScore-tc.f) > eps {
			t.Errorf("τ=%v: P=%v R=%v F=%v, want %v %v %v", tc.tau, s.Precision, s.Recall, s.FScore, tc.p, tc.r, tc.f)
		}
		// Chamfer: (0.95 + 0.6)/2; Hausdorff-95: nearest rank ⌈0.95·7⌉ = 7
		// of the sorted 0.3 0.3 0.5 0.5 1 1 2, i.e. 2.
		if math.Abs(s.Chamfer-0.775) > 1e-15 || s.Hausdorff95 != 2 {
			t.Errorf("Chamfer %v, Hausdorff-95 %v, want 0.775 and 2", s.Chamfer, s.Hausdorff95)
		}
	}
	if _, err := PointSetScores(nil, ref, 1); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("empty scan: error %v, want ErrDegenerate", err)
	}
	if _, err := ScoresFromDistances([]float64{1}, []float64{math.NaN()}, 1); err == nil {
		t.Error("NaN distance: no error")
	}
	if _, err := ScoresFromDistances([]float64{1}, []float64{1}, -1); err == nil {
		t.Error("negative τ: no error")
	}
}

// A sphere of radius r against the same sphere scaled by (1+ε): every
// point of one lies εr from the other (closed form), so Chamfer and
// Hausdorff-95 are εr, F is 0 for τ < εr and 1 for τ > εr, and the
// estimated scale is 1+ε. The tessellation adds at most the sagitta
// s = h²/(8r) of its longest edge h on each side (handbook chord
// geometry), which bounds the tolerance.
func TestCompareScaledSphere(t *testing.T) {
	const r, eps = 0.02, 0.05
	ref := tstIcosphere(r, 5)
	scan := ref.Clone()
	for i := range scan.Vertices {
		scan.Vertices[i] = r3.Scale(1+eps, scan.Vertices[i])
	}
	var h float64
	for _, f := range ref.Faces {
		h = math.Max(h, r3.Norm(r3.Sub(ref.Vertices[f[0]], ref.Vertices[f[1]])))
	}
	sag := h * h / (8 * r)
	tol := 2*(1+eps)*sag + 1e-12
	for _, tc := range []struct{ tau, f float64 }{{0.5 * eps * r, 0}, {2 * eps * r, 1}} {
		opt := DefaultCompareOptions()
		opt.Align = AlignNone
		opt.Threshold = tc.tau
		opt.Spacing = 0.001 // the distances do not depend on the sampling here
		c, err := Compare(scan, ref, opt)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("τ=%.3g mm: Chamfer %.6f mm, H95 %.6f mm (want %.6f ± %.2g), scale %.6f, F %v", tc.tau*1e3, c.Chamfer*1e3, c.Hausdorff95*1e3, eps*r*1e3, tol*1e3, c.Scale, c.FScore)
		if math.Abs(c.Chamfer-eps*r) > tol || math.Abs(c.Hausdorff95-eps*r) > tol {
			t.Errorf("τ=%v: Chamfer %.6g, Hausdorff-95 %.6g, want %.6g ± %.2g", tc.tau, c.Chamfer, c.Hausdorff95, eps*r, tol)
		}
		if c.FScore != tc.f || c.Precision != tc.f || c.Recall != tc.f {
			t.Errorf("τ=%v: P=%v R=%v F=%v, want all %v", tc.tau, c.Precision, c.Recall, c.FScore, tc.f)
		}
		// Signed deviation: the scan is outside, by εr.
		if math.Abs(c.MeanDeviation-eps*r) > tol || math.Abs(c.MaxDeviation-eps*r) > tol {
			t.Errorf("mean deviation %.6g, max %.6g, want %.6g", c.MeanDeviation, c.MaxDeviation, eps*r)
		}
		// The scale: radial pairs give 1/(1+ε) up to the relative sagitta.
		if math.Abs(c.Scale-(1+eps)) > (1+eps)*sag/r*4 || !c.ScaleFlagged || c.ScaleApplied {
			t.Errorf("scale %.6g (flagged %v, applied %v), want %.6g flagged, not applied", c.Scale, c.ScaleFlagged, c.ScaleApplied, 1+eps)
		}
	}
	// Allowing the scale takes the size error out.
	opt := DefaultCompareOptions()
	opt.Align = AlignNone
	opt.AllowScale = true
	opt.Threshold = 0.5 * eps * r
	opt.Spacing = 0.001
	c, err := Compare(scan, ref, opt)
	if err != nil {
		t.Fatal(err)
	}
	if c.FScore != 1 || !c.ScaleApplied || !c.ScaleFlagged {
		t.Errorf("with scale allowed: F=%v applied %v flagged %v, want 1, true, true", c.FScore, c.ScaleApplied, c.ScaleFlagged)
	}
}

// tstSymmetricPoseError is the largest displacement of the reference's
// vertices between the recovered map and the true one, minimised over
// the part's proper symmetries (as MSSD does, Hodaň et al. 2020).
func tstSymmetricPoseError(ref *mesh.Mesh, got, truth mesh.Pose, syms []mesh.Pose) float64 {
	best := math.Inf(1)
	for _, s := range syms {
		var worst float64
		for _, x := range ref.Vertices {
			// The scan vertex of x is truth⁻¹(x); the recovered map takes
			// it to got(truth⁻¹(x)), which must be s(x).
			y := got.Apply(truth.Inv().Apply(x))
			worst = math.Max(worst, r3.Norm(r3.Sub(y, s.Apply(x))))
		}
		best = math.Min(best, worst)
	}
	return best
}

func TestCompareRecoversRigidTransform(t *testing.T) {
	ref, part := tstPart(t, "bracket", 0.001)
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 0.7, r3.Vec{X: 0.1, Y: -0.05, Z: 0.3})
	scan := ref.Transform(truth.Inv())
	opt := DefaultCompareOptions()
	c, err := Compare(scan, ref, opt)
	if err != nil {
		t.Fatal(err)
	}
	syms := part.Symmetry.Rotations(1)
	// Tolerance from the sampling: the scan is an exact copy, so ICP's
	// residual is rounding, and the pose may be off only by what the
	// alignment points (spacing ≈ √(0.55·area/3000)) fail to pin down;
	// a quarter of the evaluation spacing τ/2 is far above that and far
	// below τ.
	tol := opt.Threshold / 8
	e := tstSymmetricPoseError(ref, c.ScanToReference, truth, syms)
	t.Logf("%d faces; pose error %.3g mm; F %v, Chamfer %.3g mm, scale %.7f, ICP RMS %.3g mm, inliers %.3f; timings %v",
		len(ref.Faces), e*1e3, c.FScore, c.Chamfer*1e3, c.Scale, c.AlignRMS*1e3, c.AlignInlierRatio, c.Timings)
	if e > tol {
		t.Errorf("recovered pose moves the part by up to %.4g mm from the truth, want ≤ %.3g mm", e*1e3, tol*1e3)
	}
	if c.FScore != 1 || c.Chamfer > tol || c.ScaleFlagged || math.Abs(c.ScaleError) > 1e-4 {
		t.Errorf("exact copy: F=%v Chamfer=%.3g mm scale %.6f (flagged %v), want 1, ~0, 1, false", c.FScore, c.Chamfer*1e3, c.Scale, c.ScaleFlagged)
	}
	if len(c.VertexDeviation) != len(scan.Vertices) || len(c.AlignedScan.Colors) != len(scan.Vertices) {
		t.Fatalf("deviation per vertex: %d values for %d vertices", len(c.VertexDeviation), len(scan.Vertices))
	}
}

// A scan 3% too large and a scan in millimetres read as metres must be
// flagged, not absorbed.
func TestCompareFlagsScale(t *testing.T) {
	ref, _ := tstPart(t, "bracket", 0.001)
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: -2, Y: 1, Z: 0.5}, 2.1, r3.Vec{X: -0.2, Y: 0.05, Z: 0.4})
	scaled := func(s float64) *mesh.Mesh {
		m := ref.Transform(truth.Inv())
		for i := range m.Vertices {
			m.Vertices[i] = r3.Scale(s, m.Vertices[i])
		}
		return m
	}
	t.Run("1.03", func(t *testing.T) {
		opt := DefaultCompareOptions()
		c, err := Compare(scaled(1.03), ref, opt)
		if err != nil {
			t.Fatal(err)
		}
		// The similarity fit on exact surfaces settles to within its stop
		// rule (10⁻⁵ per round) plus what the sampled alignment points
		// leave undetermined; 10⁻³ is a thirtieth of the error to find.
		t.Logf("1.03: scale %.6f, F %.4f, Chamfer %.3g mm, mean dev %.3g mm", c.Scale, c.FScore, c.Chamfer*1e3, c.MeanDeviation*1e3)
		if !c.ScaleFlagged || math.Abs(c.Scale-1.03) > 1e-3 || c.ScaleApplied {
			t.Errorf("scale %.5f flagged %v applied %v, want 1.03 flagged, not applied", c.Scale, c.ScaleFlagged, c.ScaleApplied)
		}
		if c.MeanDeviation <= 0 {
			t.Errorf("a scan too large measured at its own size: mean deviation %.3g, want > 0", c.MeanDeviation)
		}
		opt.AllowScale = true
		c2, err := Compare(scaled(1.03), ref, opt)
		if err != nil {
			t.Fatal(err)
		}
		if !c2.ScaleFlagged || !c2.ScaleApplied || c2.FScore < 0.999 || c2.Chamfer > c.Chamfer/5 {
			t.Errorf("scale allowed: flagged %v applied %v F=%v Chamfer %.3g mm (rigid %.3g mm)", c2.ScaleFlagged, c2.ScaleApplied, c2.FScore, c2.Chamfer*1e3, c.Chamfer*1e3)
		}
	})
	t.Run("1000", func(t *testing.T) {
		opt := DefaultCompareOptions()
		opt.MaxSamples = 20000
		c, err := Compare(scaled(1000), ref, opt)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("1000: scale %.6f, F %.4f, warnings %q", c.Scale, c.FScore, c.Warnings)
		if !c.ScaleFlagged || math.Abs(c.Scale/1000-1) > 1e-3 || !strings.Contains(c.UnitHint, "millimetres read as metres") {
			t.Errorf("scale %.5g flagged %v hint %q", c.Scale, c.ScaleFlagged, c.UnitHint)
		}
		if c.FScore > 0.01 {
			t.Errorf("a scan 1000× too large scores F=%v at its own size, want ≈ 0", c.FScore)
		}
	})
}

func TestSaveDeviationPLY(t *testing.T) {
	ref := tstBox(0.04, 0.03, 0.02, 2)
	scan := ref.Clone()
	for i := range scan.Vertices {
		scan.Vertices[i] = r3.Scale(1.01, scan.Vertices[i])
	}
	opt := DefaultCompareOptions()
	opt.Align = AlignNone
	c, err := Compare(scan, ref, opt)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "dev.ply")
	if err := c.SaveDeviationPLY(path); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	m, sc, err := mesh.ReadPLYScalars(bytes.NewReader(data))
	if err != nil {
		t.Fatal(err)
	}
	if len(sc) != 1 || sc[0].Name != "deviation" || len(sc[0].Values) != len(m.Vertices) || m.Colors == nil {
		t.Fatalf("PLY has scalars %v, colours %v", len(sc), m.Colors != nil)
	}
	for i, v := range sc[0].Values {
		// float32 storage: relative rounding 6e-8.
		if math.Abs(float64(v)-c.VertexDeviation[i]) > 1e-7*math.Abs(c.VertexDeviation[i])+1e-12 {
			t.Fatalf("vertex %d: stored %v, computed %v", i, v, c.VertexDeviation[i])
		}
	}
	// A box scaled by 1.01 about its centre: every vertex is outside.
	for i, d := range c.VertexDeviation {
		if !(d > 0) {
			t.Fatalf("vertex %d of the larger box has deviation %v, want > 0", i, d)
		}
	}
}

func TestCompareOptionsAndCancel(t *testing.T) {
	ref := tstBox(0.04, 0.03, 0.02, 2)
	bad := []func(*CompareOptions){
		func(o *CompareOptions) { o.Threshold = 0 },
		func(o *CompareOptions) { o.Spacing = -1 },
		func(o *CompareOptions) { o.MaxSamples = 1 },
		func(o *CompareOptions) { o.Align = 7 },
		func(o *CompareOptions) { o.ScaleTolerance = math.NaN() },
		func(o *CompareOptions) { o.AlignPoints = 1 },
	}
	for i, f := range bad {
		opt := DefaultCompareOptions()
		f(&opt)
		if _, err := Compare(ref, ref, opt); err == nil {
			t.Errorf("bad option %d: no error", i)
		}
	}
	if _, err := Compare(&mesh.Mesh{}, ref, DefaultCompareOptions()); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("empty scan: %v, want ErrDegenerate", err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := CompareContext(ctx, ref, ref, DefaultCompareOptions()); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v, want context.Canceled", err)
	}
}

func TestDeviationColor(t *testing.T) {
	// The ends and the middle of the ramp are its stops.
	if c := DeviationColor(0, 1); c != (mesh.RGB{R: 40, G: 200, B: 60}) {
		t.Errorf("zero deviation colour %v", c)
	}
	if c := DeviationColor(5, 1); c != (mesh.RGB{R: 230, G: 20, B: 20}) {
		t.Errorf("saturated positive colour %v", c)
	}
	if c := DeviationColor(-5, 1); c != (mesh.RGB{R: 0, G: 40, B: 255}) {
		t.Errorf("saturated negative colour %v", c)
	}
	if c := DeviationColor(math.NaN(), 1); c != (mesh.RGB{R: 128, G: 128, B: 128}) {
		t.Errorf("NaN colour %v", c)
	}
	if unitHint(1.0) != "" || !strings.Contains(unitHint(0.001), "metres read as millimetres") || !strings.Contains(unitHint(25.0), "inches") {
		t.Error("unit hints wrong")
	}
}

// A scan that never saw the underside: the pose is still found (from
// the part's other faces), precision stays 1 and recall drops by the
// missing area's share of the reference points (sampled evenly, so the
// share of area), less the rim that lies within τ of the scan.
func TestComparePartialScan(t *testing.T) {
	ref, part := tstPart(t, "bracket", 0.001)
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: 0.3, Y: -1, Z: 0.2}, 1.2, r3.Vec{X: 0.02, Y: 0.01, Z: 0.5})
	partial := ref.Clone()
	var missing float64
	areas := ref.FaceAreas()
	kept := partial.Faces[:0]
	for i, f := range ref.Faces {
		c := r3.Scale(1.0/3, r3.Add(r3.Add(ref.Vertices[f[0]], ref.Vertices[f[1]]), ref.Vertices[f[2]]))
		if c.Z < 0.0005 && ref.FaceNormal(f).Z < -0.9 {
			missing += areas[i]
			continue
		}
		kept = append(kept, f)
	}
	partial.Faces = kept
	partial.RemoveUnreferencedVertices()
	scan := partial.Transform(truth.Inv())
	opt := DefaultCompareOptions()
	c, err := Compare(scan, ref, opt)
	if err != nil {
		t.Fatal(err)
	}
	share := missing / ref.Area()
	e := tstSymmetricPoseError(ref, c.ScanToReference, truth, part.Symmetry.Rotations(1))
	t.Logf("missing %.3f of the area; pose error %.3g mm; P %.4f R %.4f F %.4f scale %.5f rms %.3g inl %.3f", share, e*1e3, c.Precision, c.Recall, c.FScore, c.Scale, c.AlignRMS*1e3, c.AlignInlierRatio)
	if e > opt.Threshold/8 {
		t.Errorf("pose error %.3g mm, want ≤ %.3g mm", e*1e3, opt.Threshold/8*1e3)
	}
	// Reference points on the missing underside count as recalled only
	// within τ of the scan, so within τ of the hole's rim (the rest of
	// the scan is a flange thickness, 4 mm > τ, away): recall lies
	// between 1 − share and 1 − share + τ·(rim length)/area, widened by
	// 0.01 for the sampling's unevenness.
	lo, hi := 1-share-0.01, 1-share+opt.Threshold*partial.BoundaryLength()/ref.Area()+0.01
	if c.Precision != 1 || c.Recall < lo || c.Recall > hi {
		t.Errorf("P=%v R=%v, want 1 and R in [%.3f, %.3f]", c.Precision, c.Recall, lo, hi)
	}
}

// tstBenchPair returns the bracket at about 50k triangles and a copy
// moved by a rigid transform, for the comparison benchmarks.
func tstBenchPair(b *testing.B) (scan, ref *mesh.Mesh) {
	ref, _ = tstPart(b, "bracket", 0.0006)
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 0.7, r3.Vec{X: 0.1, Y: -0.05, Z: 0.3})
	return ref.Transform(truth.Inv()), ref
}

func BenchmarkCompare(b *testing.B) {
	scan, ref := tstBenchPair(b)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Compare(scan, ref, DefaultCompareOptions()); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(ref.Faces)), "faces")
}

func BenchmarkNewSurface(b *testing.B) {
	_, ref := tstBenchPair(b)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := NewSurface(ref); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSurfaceClosest queries points within a few millimetres of
// the surface (as ICP and the figures do), against the brute-force scan
// over every face as the oracle's cost.
func BenchmarkSurfaceClosest(b *testing.B) {
	_, ref := tstBenchPair(b)
	s, err := NewSurface(ref)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	qs := make([]r3.Vec, 4096)
	for i := range qs {
		v := ref.Vertices[rng.IntN(len(ref.Vertices))]
		qs[i] = r3.Add(v, r3.Vec{X: 0.004 * (rng.Float64() - 0.5), Y: 0.004 * (rng.Float64() - 0.5), Z: 0.004 * (rng.Float64() - 0.5)})
	}
	b.Run("bvh", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			s.Closest(qs[i%len(qs)])
		}
	})
	b.Run("brute", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			p := qs[i%len(qs)]
			best := math.Inf(1)
			for _, f := range ref.Faces {
				q, _ := ClosestPointOnTriangle(p, ref.Vertices[f[0]], ref.Vertices[f[1]], ref.Vertices[f[2]])
				best = math.Min(best, r3.Norm2(r3.Sub(p, q)))
			}
		}
	})
}

// selectNth must put at k what a full sort by (key, index) puts there
// (the standard library's sort as the oracle), with the range split
// about it; keys with many ties.
func TestSelectNth(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for trial := 0; trial < 200; trial++ {
		n := 1 + rng.IntN(60)
		keys := make([]float64, n)
		f := make([]int32, n)
		for i := range keys {
			keys[i] = float64(rng.IntN(5))
			f[i] = int32(i)
		}
		rng.Shuffle(n, func(i, j int) { f[i], f[j] = f[j], f[i] })
		key := func(i int32) float64 { return keys[i] }
		want := append([]int32(nil), f...)
		sort.Slice(want, func(a, b int) bool {
			ka, kb := key(want[a]), key(want[b])
			return ka < kb || (ka == kb && want[a] < want[b])
		})
		k := rng.IntN(n)
		selectNth(f, k, key)
		if f[k] != want[k] {
			t.Fatalf("trial %d: element %d is %d, want %d", trial, k, f[k], want[k])
		}
		for i := range f {
			before := key(f[i]) < key(f[k]) || (key(f[i]) == key(f[k]) && f[i] < f[k])
			if (i < k && !before && f[i] != f[k]) || (i > k && before) {
				t.Fatalf("trial %d: element %d (%d) on the wrong side of %d", trial, i, f[i], k)
			}
		}
	}
}

// A scan with sensor-like noise (σ = 0.3 mm along each axis, about a
// fifth of the face-on axial noise at 0.6 m by Nguyen et al. 2012, as
// fusion averages it) still aligns to within a fraction of τ and scores
// F ≈ 1 at τ = 2 mm (6.7σ), while the mean absolute deviation reflects
// the noise: for isotropic Gaussian noise the distance along the normal
// is N(0, σ²), whose mean magnitude is σ·√(2/π) (handbook).
func TestCompareNoisyScan(t *testing.T) {
	ref, part := tstPart(t, "bracket", 0.001)
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: 2, Y: -1, Z: 1}, 2.5, r3.Vec{X: -0.1, Y: 0.2, Z: 0.6})
	scan := ref.Transform(truth.Inv())
	rng := rand.New(rand.NewPCG(21, 22))
	const sigma = 0.0003
	for i := range scan.Vertices {
		scan.Vertices[i] = r3.Add(scan.Vertices[i], r3.Vec{X: sigma * rng.NormFloat64(), Y: sigma * rng.NormFloat64(), Z: sigma * rng.NormFloat64()})
	}
	opt := DefaultCompareOptions()
	c, err := Compare(scan, ref, opt)
	if err != nil {
		t.Fatal(err)
	}
	e := tstSymmetricPoseError(ref, c.ScanToReference, truth, part.Symmetry.Rotations(1))
	t.Logf("pose error %.3g mm, F %.4f, mean |dev| %.3g mm, scale %.5f", e*1e3, c.FScore, c.MeanAbsDeviation*1e3, c.Scale)
	if e > opt.Threshold/8 || c.FScore < 0.99 || c.ScaleFlagged {
		t.Errorf("noisy scan: pose error %.3g mm, F %.4f, scale %.5f flagged %v", e*1e3, c.FScore, c.Scale, c.ScaleFlagged)
	}
	// The scan surface interpolates noisy vertices, which shrinks the
	// spread inside each face (a point inside a face mixes three
	// independent vertex errors): its mean lies between σ·√(2/π)/√3
	// (the centroid's spread) and σ·√(2/π).
	if lo, hi := sigma*math.Sqrt(2/math.Pi)/math.Sqrt(3), sigma*math.Sqrt(2/math.Pi); c.MeanAbsDeviation < lo || c.MeanAbsDeviation > hi {
		t.Errorf("mean |deviation| %.3g mm, want within [%.3g, %.3g] mm", c.MeanAbsDeviation*1e3, lo*1e3, hi*1e3)
	}
}
