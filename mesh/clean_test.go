package mesh

import (
	"fmt"
	"math"
	"slices"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// clnSoupCube returns the cube [0,1]³ as a triangle soup: every face
// has its own three vertices (36 vertices, as an STL file stores it),
// each vertex coloured by its face's index and given its face's normal.
func clnSoupCube() *Mesh {
	c := metCube(1)
	soup := &Mesh{}
	for i, f := range c.Faces {
		n := c.FaceNormal(f)
		for _, v := range f {
			soup.Vertices = append(soup.Vertices, c.Vertices[v])
			soup.Normals = append(soup.Normals, n)
			soup.Colors = append(soup.Colors, RGB{uint8(10 * i), 100, 200})
		}
		k := uint32(3 * i)
		soup.Faces = append(soup.Faces, Face{k, k + 1, k + 2})
	}
	return soup
}

// TestWeldSoupCube: welding a triangle soup of the cube must give back
// the cube's 8 corners, with the topology of a closed surface of genus 0
// (Euler's polyhedron formula, V − E + F = 8 − 18 + 12 = 2) and the
// handbook area and volume (6 and 1), unchanged by welding.
func TestWeldSoupCube(t *testing.T) {
	m := clnSoupCube()
	if m.IsWatertight() {
		t.Fatal("soup is watertight before welding")
	}
	if got := m.WeldVertices(1e-9); got != 28 {
		t.Errorf("WeldVertices removed %d vertices, want 28", got)
	}
	if len(m.Vertices) != 8 || len(m.Normals) != 8 || len(m.Colors) != 8 {
		t.Fatalf("after welding: %d vertices, %d normals, %d colours, want 8 each", len(m.Vertices), len(m.Normals), len(m.Colors))
	}
	if err := m.Validate(); err != nil {
		t.Fatal(err)
	}
	if !m.IsWatertight() || !m.IsConsistentlyOriented() || m.EulerCharacteristic() != 2 {
		t.Errorf("welded cube: watertight %v, oriented %v, χ %d; want true, true, 2", m.IsWatertight(), m.IsConsistentlyOriented(), m.EulerCharacteristic())
	}
	if m.Area() != 6 || m.SignedVolume() != 1 {
		t.Errorf("welded cube: area %v, volume %v; want 6, 1", m.Area(), m.SignedVolume())
	}
	// Exact duplicates keep their position bit for bit; the corners are
	// the cube's.
	want := metCube(1).Vertices
	for _, v := range m.Vertices {
		if !slices.Contains(want, v) {
			t.Errorf("welded vertex %v is not a cube corner", v)
		}
	}
	// Each corner's normal is the normalised mean of the face normals of
	// the soup vertices merged into it; every corner of the cube touches
	// three axis faces, so it must point into the corner's octant
	// (all components non-zero, with the signs of the corner's offset
	// from the centre).
	for i, n := range m.Normals {
		d := r3.Sub(m.Vertices[i], r3.Vec{X: 0.5, Y: 0.5, Z: 0.5})
		if n.X*d.X <= 0 || n.Y*d.Y <= 0 || n.Z*d.Z <= 0 || math.Abs(r3.Norm(n)-1) > 1e-15 {
			t.Errorf("corner %v: normal %v does not point out of its octant or is not unit", m.Vertices[i], n)
		}
	}
}

// TestWeldAveragesAttributes checks the mean of positions, normals and
// colours on a hand-computed cluster.
func TestWeldAveragesAttributes(t *testing.T) {
	m := &Mesh{
		Vertices: []r3.Vec{{}, {X: 0.002}, {X: 5}, {Y: 0.002}},
		Normals:  []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}, {Y: 1}},
		Colors:   []RGB{{0, 0, 0}, {255, 10, 1}, {7, 7, 7}, {255, 11, 2}},
		Faces:    []Face{{0, 2, 3}, {1, 2, 3}},
	}
	if got := m.WeldVertices(0.003); got != 2 {
		t.Fatalf("removed %d, want 2", got)
	}
	// Cluster {0, 1, 3}: mean position (0.002/3, 0.002/3, 0), normal
	// (1, 2, 0)/√5, colour (510/3, 21/3, 3/3) = (170, 7, 1).
	wantV := []r3.Vec{{X: 0.002 / 3, Y: 0.002 / 3}, {X: 5}}
	for i, v := range m.Vertices {
		if r3.Norm(r3.Sub(v, wantV[i])) > 1e-18 {
			t.Errorf("vertex %d = %v, want %v", i, v, wantV[i])
		}
	}
	if n := m.Normals[0]; r3.Norm(r3.Sub(n, r3.Vec{X: 1 / math.Sqrt(5), Y: 2 / math.Sqrt(5)})) > 1e-15 {
		t.Errorf("normal = %v, want (1,2,0)/√5", n)
	}
	if c := m.Colors[0]; c != (RGB{170, 7, 1}) {
		t.Errorf("colour = %v, want {170 7 1}", c)
	}
	if want := []Face{{0, 1, 0}, {0, 1, 0}}; !slices.Equal(m.Faces, want) {
		t.Errorf("faces = %v, want %v", m.Faces, want)
	}
	// Both faces collapsed; degenerate clean-up removes them.
	if got := m.RemoveDegenerateFaces(0); got != 2 || len(m.Faces) != 0 {
		t.Errorf("RemoveDegenerateFaces removed %d, left %v", got, m.Faces)
	}
}

// clnGreedyWeld is the obviously right O(n²) oracle for the clustering
// rule of WeldVertices: it returns the cluster number of each vertex.
func clnGreedyWeld(pts []r3.Vec, tol float64) []int {
	label := make([]int, len(pts))
	for i := range label {
		label[i] = -1
	}
	n := 0
	for i, p := range pts {
		if label[i] >= 0 {
			continue
		}
		label[i] = n
		if isFinite(p) {
			for j := i + 1; j < len(pts); j++ {
				if label[j] < 0 && isFinite(pts[j]) && kdOracleDist2(pts[j], p) <= tol*tol {
					label[j] = n
				}
			}
		}
		n++
	}
	return label
}

func TestWeldMatchesGreedyOracle(t *testing.T) {
	for _, c := range kdCloudCases() {
		if len(c.pts) > 2000 {
			continue // the O(n²) oracle would dominate the test time
		}
		for _, tol := range []float64{0, 0.003, 0.03, 1} {
			m := &Mesh{Vertices: slices.Clone(c.pts)}
			for i := 0; i+2 < len(c.pts); i += 3 {
				m.Faces = append(m.Faces, Face{uint32(i), uint32(i + 1), uint32(i + 2)})
			}
			orig := m.Clone()
			removed := m.WeldVertices(tol)
			label := clnGreedyWeld(c.pts, tol)
			clusters := 0
			for _, l := range label {
				clusters = max(clusters, l+1)
			}
			if removed != len(c.pts)-clusters || len(m.Vertices) != clusters {
				t.Fatalf("%s tol %g: removed %d leaving %d, oracle has %d clusters of %d", c.name, tol, removed, len(m.Vertices), clusters, len(c.pts))
			}
			// Every face corner now points at its oracle cluster (kept
			// vertices are numbered in order of first member, as the
			// oracle numbers its clusters).
			for i, f := range m.Faces {
				for k, v := range f {
					if want := label[orig.Faces[i][k]]; int(v) != want {
						t.Fatalf("%s tol %g: face %d corner %d → %d, want %d", c.name, tol, i, k, v, want)
					}
				}
			}
		}
	}
}

func TestWeldEdgeCases(t *testing.T) {
	// A chain 0 — 0.6 — 1.2 with tol 1: greedy in index order merges the
	// first two only.
	m := &Mesh{Vertices: []r3.Vec{{}, {X: 0.6}, {X: 1.2}}}
	if got := m.WeldVertices(1); got != 1 || len(m.Vertices) != 2 {
		t.Errorf("chain: removed %d, left %v", got, m.Vertices)
	}
	for _, tol := range []float64{-1, math.NaN()} {
		m := clnSoupCube()
		if got := m.WeldVertices(tol); got != 0 || len(m.Vertices) != 36 {
			t.Errorf("tol %v: removed %d", tol, got)
		}
	}
	// tol = 0 merges exact duplicates only.
	m = &Mesh{Vertices: []r3.Vec{{X: 1}, {X: 1}, {X: math.Nextafter(1, 2)}, {X: math.NaN()}, {X: math.NaN()}}}
	if got := m.WeldVertices(0); got != 1 || len(m.Vertices) != 4 {
		t.Errorf("tol 0: removed %d, left %v", got, m.Vertices)
	}
	if !math.IsNaN(m.Vertices[2].X) || !math.IsNaN(m.Vertices[3].X) {
		t.Errorf("non-finite vertices not kept apart: %v", m.Vertices)
	}
	empty := &Mesh{}
	if got := empty.WeldVertices(1); got != 0 {
		t.Errorf("empty: removed %d", got)
	}
}

func TestRemoveDegenerateFaces(t *testing.T) {
	m := metCube(1)
	m.Vertices = append(m.Vertices, r3.Vec{X: 2}, r3.Vec{X: 3}, r3.Vec{X: 4}, r3.Vec{X: 2, Y: 1e-4})
	// Repeated index; collinear (zero area); a sliver of area
	// ½·2·1e-4 = 1e-4; then the cube.
	m.Faces = append([]Face{{0, 0, 1}, {8, 9, 10}, {8, 10, 11}}, m.Faces...)
	if got := m.Clone().RemoveDegenerateFaces(0); got != 2 {
		t.Errorf("RemoveDegenerateFaces(0) removed %d, want 2", got)
	}
	c := m.Clone()
	if got := c.RemoveDegenerateFaces(2e-4); got != 3 {
		t.Errorf("RemoveDegenerateFaces(2e-4) removed %d, want 3", got)
	}
	if !slices.Equal(c.Faces, metCube(1).Faces) {
		t.Errorf("kept faces %v, want the cube's in order", c.Faces)
	}
	if got := m.Clone().RemoveDegenerateFaces(math.NaN()); got != 2 {
		t.Errorf("RemoveDegenerateFaces(NaN) removed %d, want 2 (as for 0)", got)
	}
}

// clnTwoCubes returns a unit cube and, 10 m away, a cube of side 0.5
// whose every square face is split into 8 triangles (48 faces: more
// faces than the big cube's 12, less area).
func clnTwoCubes() *Mesh {
	m := metCube(1)
	small := metCube(0.5).Transform(PoseFromAxisAngle(r3.Vec{Z: 1}, 0, r3.Vec{X: 10}))
	off := uint32(len(m.Vertices))
	m.Vertices = append(m.Vertices, small.Vertices...)
	for _, f := range small.Faces {
		// Split each triangle into 4 by its edge midpoints.
		a, b, c := small.Vertices[f[0]], small.Vertices[f[1]], small.Vertices[f[2]]
		base := uint32(len(m.Vertices))
		m.Vertices = append(m.Vertices, r3.Scale(0.5, r3.Add(a, b)), r3.Scale(0.5, r3.Add(b, c)), r3.Scale(0.5, r3.Add(c, a)))
		ab, bc, ca := base, base+1, base+2
		m.Faces = append(m.Faces,
			Face{f[0] + off, ab, ca}, Face{ab, f[1] + off, bc}, Face{ca, bc, f[2] + off}, Face{ab, bc, ca})
	}
	return m
}

func TestComponentClean(t *testing.T) {
	m := clnTwoCubes()
	if _, n := m.Components(); n != 2 {
		t.Fatalf("fixture has %d components, want 2", n)
	}
	c := m.Clone()
	if comps, faces := c.RemoveSmallComponents(13); comps != 1 || faces != 12 {
		t.Errorf("RemoveSmallComponents(13) removed %d components, %d faces; want 1, 12", comps, faces)
	}
	if got := c.Area(); math.Abs(got-6*0.25) > 1e-12 {
		t.Errorf("left area %v, want the small cube's 1.5", got)
	}
	c = m.Clone()
	if comps, faces := c.KeepLargestComponent(); comps != 1 || faces != 48 {
		t.Errorf("KeepLargestComponent removed %d components, %d faces; want 1, 48", comps, faces)
	}
	if c.Area() != 6 || !slices.Equal(c.Faces, metCube(1).Faces) {
		t.Errorf("kept area %v, faces %v; want the unit cube", c.Area(), c.Faces)
	}
	if got := c.RemoveUnreferencedVertices(); got != len(m.Vertices)-8 {
		t.Errorf("RemoveUnreferencedVertices removed %d, want %d", got, len(m.Vertices)-8)
	}
	if comps, faces := c.KeepLargestComponent(); comps != 0 || faces != 0 {
		t.Errorf("second KeepLargestComponent removed %d, %d", comps, faces)
	}
	c = m.Clone()
	if comps, faces := c.RemoveSmallComponents(1); comps != 0 || faces != 0 {
		t.Errorf("RemoveSmallComponents(1) removed %d, %d", comps, faces)
	}
}

func TestRemoveUnreferencedVertices(t *testing.T) {
	cube := metCube(1)
	// Interleave 3 stray vertices, with attributes, and re-index.
	m := &Mesh{}
	remap := make([]uint32, 8)
	for i, v := range cube.Vertices {
		if i%3 == 0 {
			m.Vertices = append(m.Vertices, r3.Vec{X: 100 + float64(i)})
			m.Colors = append(m.Colors, RGB{1, 2, 3})
			m.Normals = append(m.Normals, r3.Vec{X: -1})
		}
		remap[i] = uint32(len(m.Vertices))
		m.Vertices = append(m.Vertices, v)
		m.Colors = append(m.Colors, RGB{uint8(i), 0, 0})
		m.Normals = append(m.Normals, r3.Vec{Z: 1})
	}
	for _, f := range cube.Faces {
		m.Faces = append(m.Faces, Face{remap[f[0]], remap[f[1]], remap[f[2]]})
	}
	if m.Diameter() <= 100 {
		t.Fatal("fixture: strays should dominate the diameter")
	}
	if got := m.RemoveUnreferencedVertices(); got != 3 {
		t.Errorf("removed %d, want 3", got)
	}
	if !slices.Equal(m.Vertices, cube.Vertices) || !slices.Equal(m.Faces, cube.Faces) {
		t.Errorf("after removal: vertices %v faces %v, want the cube", m.Vertices, m.Faces)
	}
	for i, c := range m.Colors {
		if c != (RGB{uint8(i), 0, 0}) || m.Normals[i] != (r3.Vec{Z: 1}) {
			t.Errorf("vertex %d: colour %v normal %v travelled wrongly", i, c, m.Normals[i])
		}
	}
	if err := m.Validate(); err != nil {
		t.Error(err)
	}
	if got := m.RemoveUnreferencedVertices(); got != 0 {
		t.Errorf("second pass removed %d", got)
	}
}

func TestClean(t *testing.T) {
	m := clnSoupCube()
	// A stray triangle far away and a degenerate face.
	m.Vertices = append(m.Vertices, r3.Vec{X: 50}, r3.Vec{X: 51}, r3.Vec{X: 50, Y: 1})
	m.Normals = append(m.Normals, r3.Vec{Z: 1}, r3.Vec{Z: 1}, r3.Vec{Z: 1})
	m.Colors = append(m.Colors, RGB{}, RGB{}, RGB{})
	m.Faces = append(m.Faces, Face{36, 37, 38}, Face{0, 0, 5})
	opt := DefaultCleanOptions()
	opt.KeepLargestOnly = true
	s := m.Clean(opt)
	want := CleanStats{WeldedVertices: 28, DegenerateFaces: 1, RemovedComponents: 1, ComponentFaces: 1, UnreferencedVertices: 3}
	if s != want {
		t.Errorf("Clean stats %+v, want %+v", s, want)
	}
	if len(m.Vertices) != 8 || !m.IsWatertight() || m.SignedVolume() != 1 {
		t.Errorf("cleaned: %d vertices, watertight %v, volume %v", len(m.Vertices), m.IsWatertight(), m.SignedVolume())
	}
}

func BenchmarkWeldVertices(b *testing.B) {
	// A triangle soup of a torus with 131k faces (393k vertices, about
	// 6 copies of each distinct vertex), as an STL file would load.
	tor := metTorus(0.05, 0.015, 256, 256)
	soup := &Mesh{}
	for _, f := range tor.Faces {
		k := uint32(len(soup.Vertices))
		soup.Vertices = append(soup.Vertices, tor.Vertices[f[0]], tor.Vertices[f[1]], tor.Vertices[f[2]])
		soup.Faces = append(soup.Faces, Face{k, k + 1, k + 2})
	}
	b.Run("soup-faces=131k", func(b *testing.B) {
		for b.Loop() {
			m := soup.Clone()
			m.WeldVertices(1e-6)
		}
	})
}

func ExampleMesh_Clean() {
	// A 1 m square stored as a triangle soup (each triangle with its own
	// corners, as STL stores them), a stray triangle far away, and a
	// face whose corners collapse when welded.
	m := &Mesh{
		Vertices: []r3.Vec{
			{}, {X: 1}, {X: 1, Y: 1}, // triangle 1
			{}, {X: 1, Y: 1}, {Y: 1}, // triangle 2
			{X: 5}, {X: 5.01}, {X: 5, Y: 0.01}, // stray
			{Y: 1e-9}, // a near-duplicate of the origin
		},
		Faces: []Face{{0, 1, 2}, {3, 4, 5}, {6, 7, 8}, {0, 9, 1}},
	}
	opt := DefaultCleanOptions() // welds within 1 µm
	opt.KeepLargestOnly = true
	s := m.Clean(opt)
	fmt.Printf("welded %d vertices, dropped %d degenerate faces and %d components (%d faces), removed %d stray vertices\n",
		s.WeldedVertices, s.DegenerateFaces, s.RemovedComponents, s.ComponentFaces, s.UnreferencedVertices)
	fmt.Printf("%d vertices, %d faces, area %.1f m², %d boundary edges, χ = %d\n",
		len(m.Vertices), len(m.Faces), m.Area(), len(m.BoundaryEdges()), m.EulerCharacteristic())
	// Output:
	// welded 3 vertices, dropped 1 degenerate faces and 1 components (1 faces), removed 3 stray vertices
	// 4 vertices, 2 faces, area 1.0 m², 4 boundary edges, χ = 1
}
