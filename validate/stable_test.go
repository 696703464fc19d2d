package validate

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// checkHull checks a hull against the brute-force definition: every
// input point lies on the inner side of every hull face's plane (within
// tol), and the hull is a closed, consistently oriented surface of Euler
// characteristic 2 (a convex polyhedron, Euler's formula V − E + F = 2).
func checkHull(t *testing.T, pts []r3.Vec, hull *mesh.Mesh, tol float64) {
	t.Helper()
	if !hull.IsWatertight() || !hull.IsConsistentlyOriented() {
		t.Fatalf("hull not closed and oriented: %d faces", len(hull.Faces))
	}
	if chi := hull.EulerCharacteristic(); chi != 2 {
		t.Fatalf("hull Euler characteristic %d, want 2", chi)
	}
	for fi, f := range hull.Faces {
		a, b, c := hull.Vertices[f[0]], hull.Vertices[f[1]], hull.Vertices[f[2]]
		n := mesh.Normalize(r3.Cross(r3.Sub(b, a), r3.Sub(c, a)))
		for i, p := range pts {
			if d := r3.Dot(n, r3.Sub(p, a)); d > tol {
				t.Fatalf("point %d is %.3g above hull face %d", i, d, fi)
			}
		}
	}
}

func TestConvexHullAgainstBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 20; trial++ {
		n := 8 + rng.IntN(40)
		pts := make([]r3.Vec, n)
		for i := range pts {
			pts[i] = r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		}
		hull, src, err := ConvexHull(pts)
		if err != nil {
			t.Fatal(err)
		}
		// Tolerance: the hull's ε is 1e−9 of the diagonal (~1e−8 here).
		checkHull(t, pts, hull, 1e-8)
		// Brute force: a point is a hull vertex iff some plane through it
		// has every other point strictly on one side. Enumerate all
		// triples; a triple whose plane supports the set (all points on
		// one side) makes its three points hull points. For points in
		// general position that is exactly the vertex set.
		want := map[int]bool{}
		for i := 0; i < n; i++ {
			for j := i + 1; j < n; j++ {
				for k := j + 1; k < n; k++ {
					nn := r3.Cross(r3.Sub(pts[j], pts[i]), r3.Sub(pts[k], pts[i]))
					pos, neg := false, false
					for l, p := range pts {
						if l == i || l == j || l == k {
							continue
						}
						d := r3.Dot(nn, r3.Sub(p, pts[i]))
						pos = pos || d > 0
						neg = neg || d < 0
					}
					if !(pos && neg) {
						want[i], want[j], want[k] = true, true, true
					}
				}
			}
		}
		got := map[int]bool{}
		for _, s := range src {
			got[s] = true
		}
		if len(got) != len(want) {
			t.Fatalf("trial %d: %d hull vertices, brute force %d", trial, len(got), len(want))
		}
		for v := range want {
			if !got[v] {
				t.Fatalf("trial %d: brute force hull vertex %d missing", trial, v)
			}
		}
	}
}

// Coplanar and duplicated points: a subdivided box (many points on each
// face, shared edges) and a cube grid. The hull must have exactly the 8
// corners as vertices.
func TestConvexHullCoplanar(t *testing.T) {
	box := boxMesh(0.08, 0.05, 0.03, 6)
	hull, _, err := ConvexHull(box.Vertices)
	if err != nil {
		t.Fatal(err)
	}
	checkHull(t, box.Vertices, hull, 1e-12)
	if len(hull.Vertices) != 8 || len(hull.Faces) != 12 {
		t.Errorf("box hull: %d vertices %d faces, want 8 and 12", len(hull.Vertices), len(hull.Faces))
	}
	var grid []r3.Vec
	for i := 0; i < 5; i++ {
		for j := 0; j < 5; j++ {
			for k := 0; k < 5; k++ {
				grid = append(grid, r3.Vec{X: float64(i), Y: float64(j), Z: float64(k)}, r3.Vec{X: float64(i), Y: float64(j), Z: float64(k)})
			}
		}
	}
	hull, _, err = ConvexHull(grid)
	if err != nil {
		t.Fatal(err)
	}
	checkHull(t, grid, hull, 1e-9)
	if len(hull.Vertices) != 8 {
		t.Errorf("grid hull: %d vertices, want 8", len(hull.Vertices))
	}
	// Areas: a 4×4×4 cube has area 96 (handbook).
	if a := hull.Area(); !near(a, 96, 1e-9) {
		t.Errorf("grid hull area %v, want 96", a)
	}
}

func TestConvexHullDegenerate(t *testing.T) {
	for name, pts := range map[string][]r3.Vec{
		"three":    {{}, {X: 1}, {Y: 1}},
		"coplanar": {{}, {X: 1}, {Y: 1}, {X: 1, Y: 1}, {X: 0.5, Y: 0.2}},
		"line":     {{}, {X: 1}, {X: 2}, {X: 3}},
		"same":     {{X: 1}, {X: 1}, {X: 1}, {X: 1}},
	} {
		if _, _, err := ConvexHull(pts); !errors.Is(err, mesh.ErrDegenerate) {
			t.Errorf("%s: got %v, want ErrDegenerate", name, err)
		}
	}
	if _, _, err := ConvexHull([]r3.Vec{{}, {X: 1}, {Y: 1}, {Z: math.Inf(1)}}); err == nil {
		t.Error("infinite point: want an error")
	}
}

func TestSolidCentroid(t *testing.T) {
	// Box a×b×c on z = 0: volume abc, centroid (0, 0, c/2) (handbook).
	box := boxMesh(0.08, 0.05, 0.03, 3)
	c, v, err := SolidCentroid(box)
	if err != nil {
		t.Fatal(err)
	}
	if !near(v, 0.08*0.05*0.03, 1e-15) || r3.Norm(r3.Sub(c, r3.Vec{Z: 0.015})) > 1e-15 {
		t.Errorf("box: centroid %v volume %v", c, v)
	}
	// Regular tetrahedron of edge e: volume e³/(6√2) (handbook), centroid
	// at the mean of its corners (the origin here).
	tet := tetraMesh(0.05)
	c, v, err = SolidCentroid(tet)
	if err != nil {
		t.Fatal(err)
	}
	if !near(v, 0.05*0.05*0.05/(6*math.Sqrt2), 1e-15) || r3.Norm(c) > 1e-15 {
		t.Errorf("tetrahedron: centroid %v volume %v", c, v)
	}
	// Half a box (an open mesh) is not a solid; a flat mesh has no volume.
	flat := &mesh.Mesh{Vertices: []r3.Vec{{}, {X: 1}, {Y: 1}}, Faces: []mesh.Face{{0, 1, 2}, {0, 2, 1}}}
	if _, _, err := SolidCentroid(flat); !errors.Is(err, mesh.ErrDegenerate) {
		t.Errorf("flat mesh: %v, want ErrDegenerate", err)
	}
}

// rectSolidAngle is the solid angle of an a×b rectangle seen from a
// point at distance h above its centre: Ω = 4·arcsin(ab/√((a²+4h²)(b²+4h²)))
// (handbook formula for the solid angle of a rectangle, from memory;
// checked here against the triangle formula as well).
func rectSolidAngle(a, b, h float64) float64 {
	return 4 * math.Asin(a*b/math.Sqrt((a*a+4*h*h)*(b*b+4*h*h)))
}

func TestTriangleSolidAngle(t *testing.T) {
	// The four faces of a regular tetrahedron seen from its centre
	// subtend π each (4π/4 by symmetry).
	tet := tetraMesh(1)
	for _, f := range tet.Faces {
		if o := TriangleSolidAngle(r3.Vec{}, tet.Vertices[f[0]], tet.Vertices[f[1]], tet.Vertices[f[2]]); !near(o, math.Pi, 1e-12) {
			t.Errorf("tetrahedron face solid angle %v, want π", o)
		}
	}
	// A unit square seen from h = 0.5 above its centre subtends 2π/3
	// (one face of a cube from its centre: 4π/6), and the rectangle
	// formula gives the same.
	sq := []r3.Vec{{X: -0.5, Y: -0.5}, {X: 0.5, Y: -0.5}, {X: 0.5, Y: 0.5}, {X: -0.5, Y: 0.5}}
	p := r3.Vec{Z: -0.5}
	o := TriangleSolidAngle(p, sq[0], sq[1], sq[2]) + TriangleSolidAngle(p, sq[0], sq[2], sq[3])
	if !near(o, 2*math.Pi/3, 1e-12) || !near(rectSolidAngle(1, 1, 0.5), 2*math.Pi/3, 1e-12) {
		t.Errorf("cube face: %v and %v, want 2π/3", o, rectSolidAngle(1, 1, 0.5))
	}
	// Any closed mesh seen from inside: 4π.
	cyl := cylinderMesh(0.03, 0.02, 40)
	var sum float64
	for _, f := range cyl.Faces {
		sum += TriangleSolidAngle(r3.Vec{X: 0.01, Z: 0.005}, cyl.Vertices[f[0]], cyl.Vertices[f[1]], cyl.Vertices[f[2]])
	}
	if !near(sum, 4*math.Pi, 1e-9) {
		t.Errorf("closed cylinder from inside: %v, want 4π", sum)
	}
}

// A box rests on its six faces. Each face's probability is its solid
// angle from the centre (rectSolidAngle), so the two largest faces
// (lowest centre of mass) are the most likely, and opposite faces tie.
func TestStablePosesBox(t *testing.T) {
	a, b, c := 0.08, 0.05, 0.03
	res, err := StablePoses(boxMesh(a, b, c, 4), DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Poses) != 6 || res.MassFromHull {
		t.Fatalf("box: %d poses (mass from hull %v), want 6", len(res.Poses), res.MassFromHull)
	}
	want := []float64{
		rectSolidAngle(a, b, c/2) / (4 * math.Pi), rectSolidAngle(a, b, c/2) / (4 * math.Pi),
		rectSolidAngle(a, c, b/2) / (4 * math.Pi), rectSolidAngle(a, c, b/2) / (4 * math.Pi),
		rectSolidAngle(b, c, a/2) / (4 * math.Pi), rectSolidAngle(b, c, a/2) / (4 * math.Pi),
	}
	var total float64
	for i, p := range res.Poses {
		// Tolerance: sums of a few solid angles, rounding ~1e−15.
		if !near(p.Probability, want[i], 1e-12) {
			t.Errorf("pose %d: probability %v, want %v", i, p.Probability, want[i])
		}
		total += p.Probability
		// The pose puts the part on z = 0 with the centre of mass above
		// the origin at the face's distance.
		support := res.Hull.Transform(p.ModelToSupport).Bounds()
		if !near(support.Min.Z, 0, 1e-12) {
			t.Errorf("pose %d: lowest point at z = %v, want 0", i, support.Min.Z)
		}
		com := p.ModelToSupport.Apply(res.CenterOfMass)
		if !near(com.X, 0, 1e-12) || !near(com.Y, 0, 1e-12) || !near(com.Z, p.Height, 1e-12) {
			t.Errorf("pose %d: centre of mass at %v, height %v", i, com, p.Height)
		}
	}
	if !near(total, 1, 1e-12) {
		t.Errorf("probabilities sum to %v", total)
	}
	// Heights: c/2 on the largest faces, then b/2, then a/2.
	if !near(res.Poses[0].Height, c/2, 1e-12) || !near(res.Poses[5].Height, a/2, 1e-12) {
		t.Errorf("heights %v … %v", res.Poses[0].Height, res.Poses[5].Height)
	}
	if !near(res.Poses[0].Area, a*b, 1e-12) {
		t.Errorf("largest face area %v, want %v", res.Poses[0].Area, a*b)
	}
}

func TestStablePosesTetrahedron(t *testing.T) {
	res, err := StablePoses(tetraMesh(0.05), DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Poses) != 4 {
		t.Fatalf("tetrahedron: %d poses, want 4", len(res.Poses))
	}
	for _, p := range res.Poses {
		if !near(p.Probability, 0.25, 1e-12) {
			t.Errorf("probability %v, want 1/4", p.Probability)
		}
		// Tipping angle of a regular tetrahedron on a face: the centroid
		// is at height e/√24 (a quarter of the height e√(2/3)) above a
		// face whose inradius is e/√12, so tan θ = √24/√12 = √2.
		if !near(p.TipAngle, math.Atan(math.Sqrt2), 1e-12) {
			t.Errorf("tip angle %v, want atan √2", p.TipAngle)
		}
	}
}

// Cylinders. The solid angle of a disc of radius r seen on its axis from
// distance z is 2π(1 − z/√(z² + r²)) (handbook); the polygon of n = 48
// sides has 0.3 % less area than the disc, so the probabilities agree to
// a few tenths of a per cent.
func TestStablePosesCylinder(t *testing.T) {
	disc := func(r, z float64) float64 { return 2 * math.Pi * (1 - z/math.Hypot(z, r)) / (4 * math.Pi) }

	// Short and wide (r = 40 mm, h = 10 mm): the side band tips off onto
	// the ends at atan(5/40) = 7.1° < 10°, so only the two ends remain,
	// sharing everything equally.
	res, err := StablePoses(cylinderMesh(0.04, 0.01, 48), DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Poses) != 2 {
		t.Fatalf("short cylinder: %d poses, want the 2 ends", len(res.Poses))
	}
	for _, p := range res.Poses {
		if !near(p.Probability, 0.5, 1e-9) || math.Abs(math.Abs(p.Normal.Z)-1) > 1e-12 || p.Rolls {
			t.Errorf("short cylinder pose %+v", p)
		}
	}

	// Long and thin (r = 10 mm, h = 60 mm): the ends, and the side as one
	// rolling band with the rest of the probability.
	r, h := 0.01, 0.06
	res, err = StablePoses(cylinderMesh(r, h, 48), DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Poses) != 3 {
		t.Fatalf("long cylinder: %d poses, want side band + 2 ends", len(res.Poses))
	}
	side := res.Poses[0]
	if !side.Rolls || side.Faces != 48 || math.Abs(side.Normal.Z) > 1e-9 {
		t.Errorf("long cylinder side: %+v", side)
	}
	end := disc(r, h/2)
	if !near(side.Probability, 1-2*end, 0.005) || !near(res.Poses[1].Probability, end, 0.005) {
		t.Errorf("long cylinder: side %v end %v, want %v and %v", side.Probability, res.Poses[1].Probability, 1-2*end, end)
	}

	// A coarse prism (n = 8, facets tip at 22.5°) rests on each facet.
	res, err = StablePoses(cylinderMesh(r, h, 8), DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Poses) != 10 {
		t.Errorf("octagonal prism: %d poses, want 8 sides + 2 ends", len(res.Poses))
	}
}

// An open mesh (a box without its top) takes its centre of mass from
// the hull's solid, which for a convex part is the box's own.
func TestStablePosesOpenMesh(t *testing.T) {
	box := boxMesh(0.04, 0.04, 0.02, 1)
	var keep []mesh.Face
	for _, f := range box.Faces {
		if box.Vertices[f[0]].Z == 0.02 && box.Vertices[f[1]].Z == 0.02 && box.Vertices[f[2]].Z == 0.02 {
			continue
		}
		keep = append(keep, f)
	}
	box.Faces = keep
	res, err := StablePoses(box, DefaultStableOptions())
	if err != nil {
		t.Fatal(err)
	}
	if !res.MassFromHull || r3.Norm(r3.Sub(res.CenterOfMass, r3.Vec{Z: 0.01})) > 1e-12 {
		t.Errorf("open box: mass from hull %v, centre %v", res.MassFromHull, res.CenterOfMass)
	}
}

func BenchmarkConvexHull10k(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	pts := make([]r3.Vec, 10000)
	for i := range pts {
		pts[i] = mesh.Normalize(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()})
	}
	for b.Loop() {
		if _, _, err := ConvexHull(pts); err != nil {
			b.Fatal(err)
		}
	}
}

// The demo parts rest, among other poses, in the pose their part frame
// is defined in (parts package: +z up, resting on z = 0), and the
// labelbox on its six faces (handbook: a box).
func TestStablePosesDemoParts(t *testing.T) {
	if testing.Short() {
		t.Skip("meshes five parts")
	}
	for _, name := range parts.Names() {
		m, _ := partMesh(t, name)
		res, err := StablePoses(m, DefaultStableOptions())
		if err != nil {
			t.Fatal(err)
		}
		var total float64
		natural := false
		for _, p := range res.Poses {
			total += p.Probability
			t.Logf("%s: normal %.2f p %.3f tip %.1f° height %.1f mm rolls %v", name, p.Normal, p.Probability, p.TipAngle*180/math.Pi, p.Height*1e3, p.Rolls)
			if p.Normal.Z < -0.999 {
				natural = true
			}
		}
		if !near(total, 1, 1e-9) || !natural || res.MassFromHull {
			t.Errorf("%s: total %v, natural pose found %v, mass from hull %v", name, total, natural, res.MassFromHull)
		}
		if name == "labelbox" && len(res.Poses) != 6 {
			t.Errorf("labelbox: %d poses, want 6", len(res.Poses))
		}
	}
}
