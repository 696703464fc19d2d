package mesh

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// TestClipPlaneCube cuts the unit cube (built by hand) with the
// plane z = 0.3 and checks the piece against the box formulas: the
// side area 4·0.7 plus the top 1 (the cut face is open), a rim of length
// 4 exactly on the plane, and no other boundary.
func TestClipPlaneCube(t *testing.T) {
	m := unitCube()
	m.ClipPlane(r3.Vec{Z: 1}, -0.3)
	m.RemoveUnreferencedVertices()
	// Handbook box: the kept part's area is 4 sides of 1×0.7 plus the top.
	if a := m.Area(); math.Abs(a-(4*0.7+1)) > 1e-12 {
		t.Errorf("area %v, want %v", a, 4*0.7+1)
	}
	if l := m.BoundaryLength(); math.Abs(l-4) > 1e-12 {
		t.Errorf("rim length %v, want 4", l)
	}
	for _, e := range m.BoundaryEdges() {
		for _, v := range e {
			if z := m.Vertices[v].Z; math.Abs(z-0.3) > 1e-12 {
				t.Fatalf("rim vertex at z = %v, want 0.3", z)
			}
		}
	}
	if !m.IsConsistentlyOriented() {
		t.Error("cut changed the winding")
	}
	if n := len(m.NonManifoldEdges()); n != 0 {
		t.Errorf("%d non-manifold edges", n)
	}
}

// unitCube is the axis-aligned unit cube [0,1]³, outward wound.
func unitCube() *Mesh {
	v := []r3.Vec{{}, {X: 1}, {X: 1, Y: 1}, {Y: 1}, {Z: 1}, {X: 1, Z: 1}, {X: 1, Y: 1, Z: 1}, {Y: 1, Z: 1}}
	f := []Face{{0, 2, 1}, {0, 3, 2}, {4, 5, 6}, {4, 6, 7}, {0, 1, 5}, {0, 5, 4}, {1, 2, 6}, {1, 6, 5}, {2, 3, 7}, {2, 7, 6}, {3, 0, 4}, {3, 4, 7}}
	return &Mesh{Vertices: v, Faces: f}
}
