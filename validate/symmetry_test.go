package validate

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// axisNear reports whether the list has an axis within 3° of dir with
// the given fold.
func axisNear(list []SymmetryAxis, dir r3.Vec, fold int) bool {
	dir = mesh.Normalize(dir)
	for _, a := range list {
		if math.Abs(r3.Dot(a.Axis, dir)) > math.Cos(3*math.Pi/180) && a.Fold == fold {
			return true
		}
	}
	return false
}

func countFold(list []SymmetryAxis, fold int) int {
	n := 0
	for _, a := range list {
		if a.Fold == fold {
			n++
		}
	}
	return n
}

// A box with three different side lengths has exactly three 2-fold axes
// (its rotation group is the Klein four-group D2, handbook point
// groups); a printed label on one half of the top breaks all of them.
func TestDetectSymmetryBox(t *testing.T) {
	box := boxMesh(0.08, 0.05, 0.03, 16)
	plain := colorize(box.Clone(), func(r3.Vec) mesh.RGB { return mesh.RGB{R: 150, G: 110, B: 70} })
	rep, err := DetectSymmetry(plain, DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Geometry) != 3 || !axisNear(rep.Geometry, r3.Vec{X: 1}, 2) || !axisNear(rep.Geometry, r3.Vec{Y: 1}, 2) || !axisNear(rep.Geometry, r3.Vec{Z: 1}, 2) {
		t.Fatalf("box geometry axes: %+v", rep.Geometry)
	}
	if len(rep.Color) != 3 || rep.ColorBreaks() {
		t.Errorf("plain box colour axes: %+v", rep.Color)
	}
	g, err := rep.GeometryPoses(0)
	if err != nil || len(g) != 4 {
		t.Errorf("box group: %d elements (%v), want 4", len(g), err)
	}
	// The axes pass through the centroid (0, 0, 0.015).
	for _, a := range rep.Geometry {
		if r3.Norm(r3.Sub(a.Point, r3.Vec{Z: 0.015})) > 1e-9 {
			t.Errorf("axis point %v, want the centre", a.Point)
		}
	}

	labelled := colorize(box.Clone(), func(p r3.Vec) mesh.RGB {
		if p.Z > 0.03-1e-9 && p.X > 0 {
			return mesh.RGB{R: 240, G: 240, B: 235}
		}
		return mesh.RGB{R: 150, G: 110, B: 70}
	})
	rep, err = DetectSymmetry(labelled, DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Geometry) != 3 || len(rep.Color) != 0 || !rep.ColorBreaks() {
		t.Errorf("labelled box: geometry %d axes, colour %+v", len(rep.Geometry), rep.Color)
	}
	c, err := rep.ColorPoses(0)
	if err != nil || len(c) != 1 {
		t.Errorf("labelled box colour group: %d elements, want the identity only", len(c))
	}
}

// A finely polygonised cylinder is continuous about its axis with a half
// turn about a perpendicular axis through its middle (group D∞); a
// hexagonal prism is 6-fold with six perpendicular half turns (D6, 12
// rotations).
func TestDetectSymmetryCylinderAndPrism(t *testing.T) {
	rep, err := DetectSymmetry(cylinderMesh(0.02, 0.03, 96), DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	if !axisNear(rep.Geometry, r3.Vec{Z: 1}, 0) || countFold(rep.Geometry, 2) != 1 || len(rep.Geometry) != 2 {
		t.Fatalf("cylinder axes: %+v", rep.Geometry)
	}
	if rep.HasColor || rep.ColorBreaks() {
		t.Errorf("uncoloured cylinder: HasColor %v", rep.HasColor)
	}
	steps := 36
	g, err := rep.GeometryPoses(steps)
	if err != nil || len(g) != 2*steps {
		t.Errorf("cylinder group with %d steps: %d elements (%v), want %d", steps, len(g), err, 2*steps)
	}

	rep, err = DetectSymmetry(cylinderMesh(0.016, 0.013, 6), DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	if !axisNear(rep.Geometry, r3.Vec{Z: 1}, 6) || countFold(rep.Geometry, 2) != 6 {
		t.Fatalf("hexagonal prism axes: %+v", rep.Geometry)
	}
	// Corner directions (x axis, the first vertex) and flat normals
	// (30° off) are both half-turn axes.
	if !axisNear(rep.Geometry, r3.Vec{X: 1}, 2) || !axisNear(rep.Geometry, r3.Vec{X: math.Cos(math.Pi / 6), Y: math.Sin(math.Pi / 6)}, 2) {
		t.Errorf("hexagonal prism flips: %+v", rep.Geometry)
	}
	g, err = rep.GeometryPoses(0)
	if err != nil || len(g) != 12 {
		t.Errorf("D6: %d elements (%v), want 12", len(g), err)
	}
}

// A regular tetrahedron: all three second moments agree, so the whole
// half sphere is searched; its rotation group T has four 3-fold and three
// 2-fold axes, 12 rotations (handbook point groups).
func TestDetectSymmetryTetrahedron(t *testing.T) {
	if testing.Short() {
		t.Skip("half-sphere search")
	}
	rep, err := DetectSymmetry(tetraMesh(0.05), DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range rep.Geometry {
		t.Logf("tetra axis %.4f fold %d mean %.3g", a.Axis, a.Fold, a.Mean)
	}
	if countFold(rep.Geometry, 3) != 4 || countFold(rep.Geometry, 2) != 3 {
		t.Fatalf("tetrahedron axes: %+v", rep.Geometry)
	}
	if !axisNear(rep.Geometry, r3.Vec{X: 1, Y: 1, Z: 1}, 3) || !axisNear(rep.Geometry, r3.Vec{Z: 1}, 2) {
		t.Errorf("tetrahedron axes not along the corners and edge midpoints: %+v", rep.Geometry)
	}
	g, err := rep.GeometryPoses(0)
	if err != nil || len(g) != 12 {
		t.Errorf("T: %d elements (%v), want 12", len(g), err)
	}
}

// A generic tetrahedron has no symmetry.
func TestDetectSymmetryNone(t *testing.T) {
	m := &mesh.Mesh{
		Vertices: []r3.Vec{{}, {X: 0.06}, {X: 0.01, Y: 0.04}, {X: 0.02, Y: 0.01, Z: 0.03}},
		Faces:    []mesh.Face{{0, 2, 1}, {0, 1, 3}, {1, 2, 3}, {0, 3, 2}},
	}
	rep, err := DetectSymmetry(m, DefaultSymmetryOptions())
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Geometry) != 0 {
		t.Errorf("generic tetrahedron: %+v", rep.Geometry)
	}
}

// surfaceMoments against the closed form for a box surface: the area
// centroid is the box centre, and for the surface of an a×b×c box the
// second moment about the centre along x is
// [2bc·(a/2)² + 2·(ab + ac)·a²/12]/A (the two end faces at ±a/2, the
// four side faces spread uniformly over the length a), A = 2(ab+bc+ca).
func TestSurfaceMoments(t *testing.T) {
	a, b, c := 0.08, 0.05, 0.03
	cen, cov, area := surfaceMoments(boxMesh(a, b, c, 2))
	A := 2 * (a*b + b*c + c*a)
	if !near(area, A, 1e-15) || r3.Norm(r3.Sub(cen, r3.Vec{Z: c / 2})) > 1e-15 {
		t.Fatalf("area %v centroid %v", area, cen)
	}
	want := (2*b*c*a*a/4 + 2*(a*b+a*c)*a*a/12) / A
	if !near(cov[0][0], want, 1e-15) || math.Abs(cov[0][1]) > 1e-15 {
		t.Errorf("cov xx %v, want %v (xy %v)", cov[0][0], want, cov[0][1])
	}
}

func BenchmarkDetectSymmetryBox(b *testing.B) {
	box := colorize(boxMesh(0.08, 0.05, 0.03, 16), func(r3.Vec) mesh.RGB { return mesh.RGB{R: 150, G: 110, B: 70} })
	for b.Loop() {
		if _, err := DetectSymmetry(box, DefaultSymmetryOptions()); err != nil {
			b.Fatal(err)
		}
	}
}

// Every demo part against the symmetry its definition declares
// (parts.Part.Symmetry, stated in the parts package from the solid's
// construction): the fold about the declared axis, the half turn about
// the declared flip axis, and whether the colour breaks the symmetry.
func TestDetectSymmetryDemoParts(t *testing.T) {
	if testing.Short() {
		t.Skip("meshes and searches five parts")
	}
	for _, name := range parts.Names() {
		t.Run(name, func(t *testing.T) {
			m, p := partMesh(t, name)
			opt := DefaultSymmetryOptions()
			opt.Resolution = partSpacing
			rep, err := DetectSymmetry(m, opt)
			if err != nil {
				t.Fatal(err)
			}
			for _, a := range rep.Geometry {
				t.Logf("%s geometry: axis %.3f fold %d mean %.3g mm p95 %.3g mm", name, a.Axis, a.Fold, a.Mean*1e3, a.P95*1e3)
			}
			for _, a := range rep.Color {
				t.Logf("%s colour: axis %.3f fold %d mismatch %.3f", name, a.Axis, a.Fold, a.ColorMismatch)
			}
			t.Logf("%s: spacing %.3g mm, baseline %.3g / %.3g mm, colour baseline %.3f", name, rep.Spacing*1e3, rep.Baseline*1e3, rep.BaselineP95*1e3, rep.ColorBaseline)
			sym := p.Symmetry
			if sym.Fold != 1 && sym.Axis != (r3.Vec{}) {
				if !axisNear(rep.Geometry, sym.Axis, sym.Fold) {
					t.Errorf("declared %d-fold axis %v not found", sym.Fold, sym.Axis)
				}
			}
			if sym.Flip != (r3.Vec{}) && !axisNear(rep.Geometry, sym.Flip, 2) && !(sym.Fold == 1 && axisNear(rep.Geometry, sym.Flip, 2)) {
				t.Errorf("declared flip axis %v not found", sym.Flip)
			}
			// The number of rotations found equals the declared group's
			// (continuous axes discretised alike).
			declared := len(sym.Rotations(24))
			got, err := rep.GeometryPoses(24)
			if err != nil || len(got) != declared {
				t.Errorf("geometry group: %d rotations (%v), declared %d", len(got), err, declared)
			}
			if rep.ColorBreaks() != sym.ColorBreaks {
				t.Errorf("colour breaks the symmetry: detected %v, declared %v", rep.ColorBreaks(), sym.ColorBreaks)
			}
		})
	}
}

func BenchmarkDetectSymmetryPart(b *testing.B) {
	for _, name := range parts.Names() {
		m, _ := partMesh(b, name)
		b.Run(name, func(b *testing.B) {
			for b.Loop() {
				if _, err := DetectSymmetry(m, DefaultSymmetryOptions()); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
