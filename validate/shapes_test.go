package validate

import (
	"math"
	"sync"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
)

// Test geometry built by hand, so that the tests of this package depend
// only on the core mesh types. Every mesh is closed, its faces
// counter-clockwise seen from outside.

// boxMesh returns the box [−a/2, a/2]×[−b/2, b/2]×[0, c], subdivided
// into n×n quads per face so it has interior vertices on its flat faces
// (coplanar points for the hull).
func boxMesh(a, b, c float64, n int) *mesh.Mesh {
	m := &mesh.Mesh{}
	lo := r3.Vec{X: -a / 2, Y: -b / 2, Z: 0}
	size := r3.Vec{X: a, Y: b, Z: c}
	// Each face: origin corner o and edge vectors u, v with u × v
	// pointing outward.
	type face struct{ o, u, v r3.Vec }
	ex, ey, ez := r3.Vec{X: size.X}, r3.Vec{Y: size.Y}, r3.Vec{Z: size.Z}
	hi := r3.Add(lo, size)
	faces := []face{
		{lo, ey, ex}, // z = 0, normal −z
		{r3.Vec{X: lo.X, Y: lo.Y, Z: hi.Z}, ex, ey}, // z = c, +z
		{lo, ex, ez}, // y = lo, −y
		{r3.Vec{X: lo.X, Y: hi.Y, Z: lo.Z}, ez, ex}, // y = hi, +y
		{lo, ez, ey}, // x = lo, −x
		{r3.Vec{X: hi.X, Y: lo.Y, Z: lo.Z}, ey, ez}, // x = hi, +x
	}
	for _, f := range faces {
		base := uint32(len(m.Vertices))
		for j := 0; j <= n; j++ {
			for i := 0; i <= n; i++ {
				p := r3.Add(f.o, r3.Add(r3.Scale(float64(i)/float64(n), f.u), r3.Scale(float64(j)/float64(n), f.v)))
				m.Vertices = append(m.Vertices, p)
			}
		}
		for j := 0; j < n; j++ {
			for i := 0; i < n; i++ {
				v00 := base + uint32(j*(n+1)+i)
				v10, v01, v11 := v00+1, v00+uint32(n+1), v00+uint32(n+2)
				m.Faces = append(m.Faces, mesh.Face{v00, v10, v11}, mesh.Face{v00, v11, v01})
			}
		}
	}
	m.WeldVertices(1e-12)
	return m
}

// cylinderMesh returns a closed cylinder of radius r from z = 0 to z = h
// about the z axis, with n side facets and fan-triangulated caps.
func cylinderMesh(r, h float64, n int) *mesh.Mesh {
	m := &mesh.Mesh{}
	for k := 0; k < n; k++ {
		s, c := math.Sincos(2 * math.Pi * float64(k) / float64(n))
		m.Vertices = append(m.Vertices, r3.Vec{X: r * c, Y: r * s}, r3.Vec{X: r * c, Y: r * s, Z: h})
	}
	bot := uint32(len(m.Vertices))
	m.Vertices = append(m.Vertices, r3.Vec{}, r3.Vec{Z: h})
	top := bot + 1
	for k := 0; k < n; k++ {
		a0, a1 := uint32(2*k), uint32(2*k+1)
		b0, b1 := uint32(2*((k+1)%n)), uint32(2*((k+1)%n)+1)
		m.Faces = append(m.Faces, mesh.Face{a0, b0, b1}, mesh.Face{a0, b1, a1})
		m.Faces = append(m.Faces, mesh.Face{bot, b0, a0}, mesh.Face{top, a1, b1})
	}
	return m
}

// tetraMesh returns a regular tetrahedron with edge length e, centred
// on the origin.
func tetraMesh(e float64) *mesh.Mesh {
	s := e / (2 * math.Sqrt2)
	return &mesh.Mesh{
		Vertices: []r3.Vec{{X: s, Y: s, Z: s}, {X: s, Y: -s, Z: -s}, {X: -s, Y: s, Z: -s}, {X: -s, Y: -s, Z: s}},
		Faces:    []mesh.Face{{0, 1, 2}, {0, 3, 1}, {0, 2, 3}, {1, 3, 2}},
	}
}

// colorize paints every vertex with c(vertex).
func colorize(m *mesh.Mesh, c func(r3.Vec) mesh.RGB) *mesh.Mesh {
	m.Colors = make([]mesh.RGB, len(m.Vertices))
	for i, v := range m.Vertices {
		m.Colors[i] = c(v)
	}
	return m
}

// partMeshes caches the demo parts meshed for the tests.
var partMeshes sync.Map

// partSpacing is the lattice spacing the demo parts are meshed at in
// the tests: 0.5 mm, fine enough for the 0.8 mm countersinks of the nut.
const partSpacing = 0.0005

// partMesh returns a demo part meshed as the pipeline meshes it
// (parts.Part.Mesh: marching cubes on its signed distance, each vertex
// coloured by the part's colour function), cached per name.
func partMesh(t testing.TB, name string) (*mesh.Mesh, *parts.Part) {
	t.Helper()
	p, err := parts.Get(name)
	if err != nil {
		t.Fatal(err)
	}
	if m, ok := partMeshes.Load(name); ok {
		return m.(*mesh.Mesh), p
	}
	m, err := p.Mesh(partSpacing)
	if err != nil {
		t.Fatal(err)
	}
	partMeshes.Store(name, m)
	return m, p
}
