package mesh

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// Fixtures built by hand. Faces are counter-clockwise seen from outside.

// metCube returns the axis-aligned cube [0,s]³ as 8 vertices and 12
// triangles, outward-oriented.
func metCube(s float64) *Mesh {
	v := make([]r3.Vec, 8)
	for i := range v {
		v[i] = r3.Vec{X: s * float64(i&1), Y: s * float64(i>>1&1), Z: s * float64(i>>2&1)}
	}
	// Vertex i has x = bit 0, y = bit 1, z = bit 2. Each quad is listed
	// counter-clockwise seen from outside and split along its first
	// diagonal.
	quads := [][4]uint32{
		{0, 2, 3, 1}, // z = 0, normal −z
		{4, 5, 7, 6}, // z = s, normal +z
		{0, 1, 5, 4}, // y = 0, normal −y
		{2, 6, 7, 3}, // y = s, normal +y
		{0, 4, 6, 2}, // x = 0, normal −x
		{1, 3, 7, 5}, // x = s, normal +x
	}
	m := &Mesh{Vertices: v}
	for _, q := range quads {
		m.Faces = append(m.Faces, Face{q[0], q[1], q[2]}, Face{q[0], q[2], q[3]})
	}
	return m
}

// metOctahedron returns the regular octahedron with vertices ±e_i (edge
// length √2).
func metOctahedron() *Mesh {
	v := []r3.Vec{{X: 1}, {X: -1}, {Y: 1}, {Y: -1}, {Z: 1}, {Z: -1}}
	return &Mesh{Vertices: v, Faces: metHullFaces(v, 2)}
}

// metIcosahedron returns the regular icosahedron with vertices the
// cyclic permutations of (0, ±1, ±φ), φ the golden ratio: edge length 2.
func metIcosahedron() *Mesh {
	phi := (1 + math.Sqrt(5)) / 2
	var v []r3.Vec
	for _, s1 := range []float64{-1, 1} {
		for _, s2 := range []float64{-phi, phi} {
			v = append(v, r3.Vec{X: 0, Y: s1, Z: s2}, r3.Vec{X: s1, Y: s2, Z: 0}, r3.Vec{X: s2, Y: 0, Z: s1})
		}
	}
	return &Mesh{Vertices: v, Faces: metHullFaces(v, 4)}
}

// metHullFaces finds the faces of a regular polyhedron centred at the
// origin: the vertex triples whose three edges all have squared length
// edge2, oriented so the normal points away from the centre.
func metHullFaces(v []r3.Vec, edge2 float64) []Face {
	isEdge := func(i, j int) bool { return math.Abs(r3.Norm2(r3.Sub(v[i], v[j]))-edge2) < 1e-9 }
	var faces []Face
	for i := range v {
		for j := i + 1; j < len(v); j++ {
			for k := j + 1; k < len(v); k++ {
				if !isEdge(i, j) || !isEdge(j, k) || !isEdge(i, k) {
					continue
				}
				f := Face{uint32(i), uint32(j), uint32(k)}
				n := r3.Cross(r3.Sub(v[j], v[i]), r3.Sub(v[k], v[i]))
				if r3.Dot(n, v[i]) < 0 {
					f[1], f[2] = f[2], f[1]
				}
				faces = append(faces, f)
			}
		}
	}
	return faces
}

// metTorus returns a torus of tube radius r around a circle of radius
// R in the xy-plane, sampled nu times around the axis and nv times
// around the tube; each grid quad gives two triangles, outward-oriented.
func metTorus(bigR, r float64, nu, nv int) *Mesh {
	m := &Mesh{}
	for i := 0; i < nu; i++ {
		u := 2 * math.Pi * float64(i) / float64(nu)
		for j := 0; j < nv; j++ {
			w := 2 * math.Pi * float64(j) / float64(nv)
			m.Vertices = append(m.Vertices, r3.Vec{
				X: (bigR + r*math.Cos(w)) * math.Cos(u),
				Y: (bigR + r*math.Cos(w)) * math.Sin(u),
				Z: r * math.Sin(w),
			})
		}
	}
	at := func(i, j int) uint32 { return uint32((i%nu)*nv + j%nv) }
	for i := 0; i < nu; i++ {
		for j := 0; j < nv; j++ {
			a, b, c, d := at(i, j), at(i+1, j), at(i+1, j+1), at(i, j+1)
			// ∂/∂u × ∂/∂w points outward, so (i,j)→(i+1,j)→(i+1,j+1) is
			// counter-clockwise seen from outside.
			m.Faces = append(m.Faces, Face{a, b, c}, Face{a, c, d})
		}
	}
	return m
}

// metOpenSquare returns the unit square in the z = 0 plane as two
// triangles.
func metOpenSquare() *Mesh {
	return &Mesh{
		Vertices: []r3.Vec{{}, {X: 1}, {X: 1, Y: 1}, {Y: 1}},
		Faces:    []Face{{0, 1, 2}, {0, 2, 3}},
	}
}

func metClose(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

// TestRegularSolids checks area, volume, diameter, Euler characteristic
// and watertightness of the hand-built solids against the handbook
// formulas for regular polyhedra (CRC Standard Mathematical Tables,
// "Polyhedra", from memory; re-derived here where noted): with edge a,
//
//	cube:         area 6a², volume a³, diameter a√3
//	octahedron:   area 2√3·a², volume (√2/3)·a³, diameter a√2
//	icosahedron:  area 5√3·a², volume (5/12)(3+√5)·a³,
//	              circumradius (a/4)·√(10+2√5)
//
// and Euler's polyhedron formula V − E + F = 2 for a surface of sphere
// topology. The tolerance 1e-12 is a few hundred ulps of the values
// (about 1 to 20), covering the rounding of sums over 20 faces.
func TestRegularSolids(t *testing.T) {
	const tol = 1e-12
	s5, s3, s2 := math.Sqrt(5), math.Sqrt(3), math.Sqrt(2)
	for _, c := range []struct {
		name                   string
		m                      *Mesh
		area, volume, diameter float64
		faces                  int
	}{
		{"cube a=1", metCube(1), 6, 1, s3, 12},
		{"cube a=2.5", metCube(2.5), 6 * 2.5 * 2.5, 2.5 * 2.5 * 2.5, 2.5 * s3, 12},
		// Octahedron with vertices ±e_i: a = √2.
		{"octahedron", metOctahedron(), 2 * s3 * 2, s2 / 3 * 2 * s2, 2, 8},
		// Icosahedron from (0, ±1, ±φ): a = 2, so circumradius
		// √(1+φ²) = (2/4)·√(10+2√5).
		{"icosahedron", metIcosahedron(), 5 * s3 * 4, 5.0 / 12 * (3 + s5) * 8, math.Sqrt(10 + 2*s5), 20},
	} {
		if len(c.m.Faces) != c.faces {
			t.Fatalf("%s: fixture has %d faces, want %d", c.name, len(c.m.Faces), c.faces)
		}
		if got := c.m.Area(); !metClose(got, c.area, tol) {
			t.Errorf("%s: Area() = %.15g, want %.15g", c.name, got, c.area)
		}
		if got := c.m.SignedVolume(); !metClose(got, c.volume, tol) {
			t.Errorf("%s: SignedVolume() = %.15g, want %.15g", c.name, got, c.volume)
		}
		if got := c.m.Diameter(); !metClose(got, c.diameter, tol) {
			t.Errorf("%s: Diameter() = %.15g, want %.15g", c.name, got, c.diameter)
		}
		if got := c.m.EulerCharacteristic(); got != 2 {
			t.Errorf("%s: EulerCharacteristic() = %d, want 2", c.name, got)
		}
		if !c.m.IsWatertight() || !c.m.IsConsistentlyOriented() {
			t.Errorf("%s: IsWatertight() = %v, IsConsistentlyOriented() = %v, want true, true", c.name, c.m.IsWatertight(), c.m.IsConsistentlyOriented())
		}
		if b := c.m.BoundaryEdges(); len(b) != 0 {
			t.Errorf("%s: BoundaryEdges() = %v, want none", c.name, b)
		}
		if _, n := c.m.Components(); n != 1 {
			t.Errorf("%s: %d components, want 1", c.name, n)
		}
		// Flipping every face negates the volume (divergence theorem with
		// inward normals) and keeps the orientation consistent.
		flipped := c.m.Clone()
		for i, f := range flipped.Faces {
			flipped.Faces[i] = Face{f[0], f[2], f[1]}
		}
		if got := flipped.SignedVolume(); !metClose(got, -c.volume, tol) {
			t.Errorf("%s flipped: SignedVolume() = %.15g, want %.15g", c.name, got, -c.volume)
		}
		if !flipped.IsConsistentlyOriented() {
			t.Errorf("%s flipped: not consistently oriented", c.name)
		}
		// Flipping one face breaks consistency but not watertightness.
		one := c.m.Clone()
		one.Faces[0] = Face{one.Faces[0][0], one.Faces[0][2], one.Faces[0][1]}
		if one.IsConsistentlyOriented() || !one.IsWatertight() {
			t.Errorf("%s with one face flipped: IsConsistentlyOriented() = %v, IsWatertight() = %v, want false, true", c.name, one.IsConsistentlyOriented(), one.IsWatertight())
		}
	}
}

// TestTorus checks Euler's formula for genus 1, V − E + F = 0, and the
// area and volume of a finely sampled torus against Pappus's centroid
// theorems: area 4π²Rr, volume 2π²Rr² (any calculus handbook; from
// memory). The polyhedral torus has its vertices on the smooth surface,
// so each sampled circle of n segments is shortened by the chord/arc
// ratio sin(π/n)/(π/n) ≈ 1 − (π/n)²/6; area and volume therefore fall
// short by about (π/n)²/6 per direction. The test allows (π/n)² in
// total for n = min(nu, nv), three times that estimate for two
// directions.
func TestTorus(t *testing.T) {
	const bigR, r, nu, nv = 0.05, 0.015, 96, 48
	m := metTorus(bigR, r, nu, nv)
	if got := m.EulerCharacteristic(); got != 0 {
		t.Errorf("EulerCharacteristic() = %d, want 0", got)
	}
	if !m.IsWatertight() || !m.IsConsistentlyOriented() {
		t.Errorf("torus: IsWatertight() = %v, IsConsistentlyOriented() = %v, want true, true", m.IsWatertight(), m.IsConsistentlyOriented())
	}
	rel := math.Pow(math.Pi/nv, 2)
	area, vol := 4*math.Pi*math.Pi*bigR*r, 2*math.Pi*math.Pi*bigR*r*r
	if got := m.Area(); math.Abs(got-area) > rel*area || got > area {
		t.Errorf("Area() = %.6g, want %.6g within −%.2g relative", got, area, rel)
	}
	if got := m.SignedVolume(); math.Abs(got-vol) > rel*vol || got > vol {
		t.Errorf("SignedVolume() = %.6g, want %.6g within −%.2g relative", got, vol, rel)
	}
	// Diameter: the outer equator has diameter 2(R + r); the samples
	// at u = 0 and u = π (nu even) lie exactly on it.
	if got, want := m.Diameter(), 2*(bigR+r); !metClose(got, want, 1e-15) {
		t.Errorf("Diameter() = %.17g, want %.17g", got, want)
	}
	// Removing one grid quad (two faces) punches a hole with a boundary
	// of 4 edges; V − E + F drops to −1 (one face of the cell complex
	// removed).
	holed := m.Clone()
	holed.Faces = holed.Faces[2:]
	if got := len(holed.BoundaryEdges()); got != 4 {
		t.Errorf("torus with a hole: %d boundary edges, want 4", got)
	}
	if got := holed.EulerCharacteristic(); got != -1 {
		t.Errorf("torus with a hole: EulerCharacteristic() = %d, want -1", got)
	}
}

func TestOpenSquare(t *testing.T) {
	m := metOpenSquare()
	want := []Edge{{0, 1}, {0, 3}, {1, 2}, {2, 3}}
	if got := m.BoundaryEdges(); !slices.Equal(got, want) {
		t.Errorf("BoundaryEdges() = %v, want %v", got, want)
	}
	if got := m.BoundaryLength(); got != 4 {
		t.Errorf("BoundaryLength() = %v, want 4", got)
	}
	if m.IsWatertight() {
		t.Error("open square is watertight")
	}
	if !m.IsConsistentlyOriented() {
		t.Error("open square is not consistently oriented")
	}
	// A disc: V − E + F = 4 − 5 + 2 = 1 (Euler characteristic of a disc).
	if got := m.EulerCharacteristic(); got != 1 {
		t.Errorf("EulerCharacteristic() = %d, want 1", got)
	}
	if got := m.Area(); got != 1 {
		t.Errorf("Area() = %v, want 1", got)
	}
	wantUses := []EdgeUse{
		{Edge{0, 1}, 1, 1}, {Edge{0, 2}, 2, 1}, {Edge{0, 3}, 1, 0}, {Edge{1, 2}, 1, 1}, {Edge{2, 3}, 1, 1},
	}
	if got := m.Edges(); !slices.Equal(got, wantUses) {
		t.Errorf("Edges() = %v, want %v", got, wantUses)
	}
}

func TestNonManifoldEdge(t *testing.T) {
	// Three triangles hinged on the edge 0–1, like pages of a book.
	m := &Mesh{
		Vertices: []r3.Vec{{}, {X: 1}, {Y: 1}, {Z: 1}, {Y: -1, Z: -1}},
		Faces:    []Face{{0, 1, 2}, {1, 0, 3}, {0, 1, 4}},
	}
	if got, want := m.NonManifoldEdges(), []Edge{{0, 1}}; !slices.Equal(got, want) {
		t.Errorf("NonManifoldEdges() = %v, want %v", got, want)
	}
	if m.IsWatertight() || m.IsConsistentlyOriented() {
		t.Error("book of three pages reported watertight or consistently oriented")
	}
	if got := len(m.BoundaryEdges()); got != 6 {
		t.Errorf("%d boundary edges, want 6", got)
	}
}

func TestDegenerateFacesInMetrics(t *testing.T) {
	m := metCube(1)
	m.Faces = append(m.Faces, Face{0, 0, 1}, Face{3, 5, 3})
	if got := m.Area(); got != 6 {
		t.Errorf("Area() with repeated-index faces = %v, want 6", got)
	}
	if !m.IsWatertight() || m.EulerCharacteristic() != 2 {
		t.Errorf("repeated-index faces changed topology: watertight %v, χ %d", m.IsWatertight(), m.EulerCharacteristic())
	}
	if got := m.FaceAreas(); len(got) != 14 || got[12] != 0 || got[13] != 0 || got[0] != 0.5 {
		t.Errorf("FaceAreas() = %v", got)
	}
	empty := &Mesh{}
	if empty.Area() != 0 || empty.SignedVolume() != 0 || empty.Diameter() != 0 || !empty.Bounds().Empty() ||
		empty.IsWatertight() || empty.EulerCharacteristic() != 0 || empty.BoundaryLength() != 0 {
		t.Error("empty mesh: want zero metrics, an empty box and not watertight")
	}
	if l, n := empty.Components(); len(l) != 0 || n != 0 {
		t.Errorf("empty mesh: Components() = %v, %d", l, n)
	}
}

// TestFaceAreasMatchGonum compares per-face areas with gonum's
// r3.Triangle.Area (an independent, numerically careful formula) on
// random triangles; they agree to a few ulps of the area (relative
// 1e-12 leaves room for the two formulas' different rounding).
func TestFaceAreasMatchGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	m := &Mesh{Vertices: kdUniformCloud(rng, 300)}
	for i := 0; i+2 < len(m.Vertices); i += 3 {
		m.Faces = append(m.Faces, Face{uint32(i), uint32(i + 1), uint32(i + 2)})
	}
	var sum float64
	for i, a := range m.FaceAreas() {
		f := m.Faces[i]
		want := r3.Triangle{m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]}.Area()
		if math.Abs(a-want) > 1e-12*want {
			t.Errorf("face %d: area %.17g, gonum %.17g", i, a, want)
		}
		sum += a
	}
	if got := m.Area(); math.Abs(got-sum) > 1e-12*sum {
		t.Errorf("Area() = %.17g, sum of FaceAreas %.17g", got, sum)
	}
}

// TestVolumeFarFromOrigin moves the cube a kilometre away: the volume
// must stay 1 to within rounding. Coordinates near 1000 have an ulp of
// 1.1e-13; the centred products stay near 1, so 1e-12 is ample, where an
// origin-based sum would lose about six digits (products near 1e9).
func TestVolumeFarFromOrigin(t *testing.T) {
	m := metCube(1).Transform(PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 0.7, r3.Vec{X: 1000, Y: -700, Z: 300}))
	if got := m.SignedVolume(); !metClose(got, 1, 1e-12) {
		t.Errorf("SignedVolume() far from origin = %.17g, want 1", got)
	}
	if got := m.Area(); !metClose(got, 6, 1e-9) {
		t.Errorf("Area() far from origin = %.17g, want 6", got)
	}
}

func TestVertexNormals(t *testing.T) {
	// Octahedron: each vertex ±e_i sits in four congruent faces placed
	// symmetrically around it, so the area-weighted normal is the vertex
	// direction itself (symmetry).
	m := metOctahedron()
	for i, n := range m.VertexNormals() {
		if d := r3.Norm(r3.Sub(n, m.Vertices[i])); d > 1e-15 {
			t.Errorf("octahedron vertex %d: normal %v, want %v", i, n, m.Vertices[i])
		}
	}
	// Torus: the area-weighted normal at a vertex approximates the smooth
	// surface normal (cos w cos u, cos w sin u, sin w). The error is first
	// order in the grid step for an asymmetric triangle fan: allow the
	// angle of one step around the tube, 2π/nv.
	const nu, nv = 64, 32
	tor := metTorus(2, 0.5, nu, nv)
	for k, n := range tor.VertexNormals() {
		i, j := k/nv, k%nv
		u, w := 2*math.Pi*float64(i)/nu, 2*math.Pi*float64(j)/nv
		want := r3.Vec{X: math.Cos(w) * math.Cos(u), Y: math.Cos(w) * math.Sin(u), Z: math.Sin(w)}
		if a := math.Acos(min(1, r3.Dot(n, want))); a > 2*math.Pi/nv {
			t.Fatalf("torus vertex (%d,%d): normal %v is %.3g rad from %v", i, j, n, a, want)
		}
	}
	// Unreferenced and degenerate-only vertices get the zero vector.
	iso := &Mesh{Vertices: []r3.Vec{{}, {X: 1}, {Y: 1}, {Z: 5}}, Faces: []Face{{0, 1, 2}, {3, 3, 0}}}
	ns := iso.VertexNormals()
	if ns[3] != (r3.Vec{}) || ns[0] != (r3.Vec{Z: 1}) {
		t.Errorf("VertexNormals() = %v, want +z for 0..2 and zero for 3", ns)
	}
}

func TestComponents(t *testing.T) {
	a := metCube(1)
	b := metCube(1).Transform(PoseFromAxisAngle(r3.Vec{Z: 1}, 0, r3.Vec{X: 3}))
	// Interleave: cube A's faces, then B's, offset by 8 vertices, then a
	// triangle touching B only at one vertex (shared vertex connects).
	m := &Mesh{Vertices: append(slices.Clone(a.Vertices), b.Vertices...)}
	m.Vertices = append(m.Vertices, r3.Vec{X: 9}, r3.Vec{X: 9, Y: 1})
	m.Faces = append(m.Faces, Face{8, 16, 17})
	m.Faces = append(m.Faces, a.Faces...)
	for _, f := range b.Faces {
		m.Faces = append(m.Faces, Face{f[0] + 8, f[1] + 8, f[2] + 8})
	}
	labels, n := m.Components()
	if n != 2 {
		t.Fatalf("%d components, want 2", n)
	}
	// Labels number components in order of first face: face 0 (on B's
	// side) is component 0, cube A is 1.
	if labels[0] != 0 {
		t.Errorf("labels[0] = %d, want 0", labels[0])
	}
	for i := 1; i <= 12; i++ {
		if labels[i] != 1 {
			t.Errorf("cube A face %d: label %d, want 1", i-1, labels[i])
		}
	}
	for i := 13; i < len(labels); i++ {
		if labels[i] != 0 {
			t.Errorf("cube B face %d: label %d, want 0", i-13, labels[i])
		}
	}
	// Oracle: a breadth-first search over faces sharing a vertex.
	rng := rand.New(rand.NewPCG(23, 24))
	r := &Mesh{Vertices: make([]r3.Vec, 400)}
	for i := 0; i < 250; i++ {
		r.Faces = append(r.Faces, Face{uint32(rng.IntN(400)), uint32(rng.IntN(400)), uint32(rng.IntN(400))})
	}
	got, gotN := r.Components()
	want, wantN := metComponentsBFS(r)
	if gotN != wantN || !slices.Equal(got, want) {
		t.Errorf("random mesh: Components() = %d components %v\nBFS: %d components %v", gotN, got, wantN, want)
	}
}

// metComponentsBFS labels faces by breadth-first search over shared
// vertices, numbering components in order of their first face.
func metComponentsBFS(m *Mesh) ([]int, int) {
	byVertex := make(map[uint32][]int)
	for i, f := range m.Faces {
		for _, v := range f {
			byVertex[v] = append(byVertex[v], i)
		}
	}
	labels := make([]int, len(m.Faces))
	for i := range labels {
		labels[i] = -1
	}
	n := 0
	for i := range m.Faces {
		if labels[i] >= 0 {
			continue
		}
		queue := []int{i}
		labels[i] = n
		for len(queue) > 0 {
			f := queue[0]
			queue = queue[1:]
			for _, v := range m.Faces[f] {
				for _, g := range byVertex[v] {
					if labels[g] < 0 {
						labels[g] = n
						queue = append(queue, g)
					}
				}
			}
		}
		n++
	}
	return labels, n
}

func TestBox(t *testing.T) {
	e := EmptyBox()
	if !e.Empty() || e.Size() != (r3.Vec{}) || e.Center() != (r3.Vec{}) || e.Diagonal() != 0 {
		t.Errorf("EmptyBox: Empty %v Size %v Center %v", e.Empty(), e.Size(), e.Center())
	}
	if (Box{}).Empty() {
		t.Error("zero Box (one point at the origin) reports empty")
	}
	p := e.Extend(r3.Vec{X: 1, Y: 2, Z: 3})
	if p.Empty() || p.Min != p.Max || p.Min != (r3.Vec{X: 1, Y: 2, Z: 3}) {
		t.Errorf("box of one point = %+v", p)
	}
	b := p.Extend(r3.Vec{X: -1, Y: 4, Z: 3}).Extend(r3.Vec{X: math.NaN()})
	want := Box{Min: r3.Vec{X: -1, Y: 2, Z: 3}, Max: r3.Vec{X: 1, Y: 4, Z: 3}}
	if b != want {
		t.Errorf("Extend = %+v, want %+v", b, want)
	}
	if got := b.Size(); got != (r3.Vec{X: 2, Y: 2}) {
		t.Errorf("Size = %v", got)
	}
	if got := b.Center(); got != (r3.Vec{Y: 3, Z: 3}) {
		t.Errorf("Center = %v", got)
	}
	if got := b.Union(e); got != b {
		t.Errorf("Union with empty = %+v", got)
	}
	if got := e.Union(b); got != b {
		t.Errorf("empty Union b = %+v", got)
	}
	u := b.Union(Box{Min: r3.Vec{X: 5, Y: 5, Z: 5}, Max: r3.Vec{X: 6, Y: 6, Z: 6}})
	if u != (Box{Min: r3.Vec{X: -1, Y: 2, Z: 3}, Max: r3.Vec{X: 6, Y: 6, Z: 6}}) {
		t.Errorf("Union = %+v", u)
	}
	if !u.Contains(r3.Vec{X: 6, Y: 2, Z: 4}) || u.Contains(r3.Vec{X: 6.1, Y: 2, Z: 4}) {
		t.Error("Contains wrong at the boundary")
	}
	if got := metCube(2).Bounds(); got != (Box{Max: r3.Vec{X: 2, Y: 2, Z: 2}}) {
		t.Errorf("cube Bounds = %+v", got)
	}
}

// metBruteDiameter is the obviously right O(n²) oracle.
func metBruteDiameter(pts []r3.Vec) float64 {
	best := 0.0
	for i, p := range pts {
		if !isFinite(p) {
			continue
		}
		for _, q := range pts[i+1:] {
			if isFinite(q) {
				best = max(best, kdOracleDist2(p, q))
			}
		}
	}
	return math.Sqrt(best)
}

func metSphereCloud(rng *rand.Rand, n int) []r3.Vec {
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = Normalize(r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()})
	}
	return pts
}

// TestFarthestPairMatchesBruteForce: the branch-and-bound answer must
// equal the brute-force maximum exactly (both compute each distance the
// same way), on every kind of cloud, and the returned pair must realise
// it.
func TestFarthestPairMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(25, 26))
	cases := kdCloudCases()
	cases = append(cases,
		kdCloudCase{"sphere-2000", metSphereCloud(rng, 2000), 1},
		kdCloudCase{"sphere-37", metSphereCloud(rng, 37), 1},
		kdCloudCase{"two", []r3.Vec{{X: 1}, {X: -2, Y: 4}}, 1},
	)
	for trial := 0; trial < 20; trial++ {
		cases = append(cases, kdCloudCase{"uniform-small", kdUniformCloud(rng, 2+rng.IntN(200)), 1})
	}
	for _, c := range cases {
		// Without the farthest-point walk the branch-and-bound starts from
		// an arbitrary pair and must find the diameter on its own.
		want := metBruteDiameter(c.pts)
		if _, _, d := farthestPair(c.pts, false); d != want {
			t.Errorf("%s: branch-and-bound alone gives %.17g, brute force %.17g", c.name, d, want)
		}
		i, j, d := FarthestPair(c.pts)
		if d != want {
			t.Errorf("%s: FarthestPair distance %.17g, brute force %.17g", c.name, d, want)
			continue
		}
		if want == 0 && len(c.pts) < 2 {
			if i != -1 || j != -1 {
				t.Errorf("%s: FarthestPair = (%d, %d), want (-1, -1)", c.name, i, j)
			}
			continue
		}
		if i >= j || math.Sqrt(kdOracleDist2(c.pts[i], c.pts[j])) != d {
			t.Errorf("%s: pair (%d, %d) is %.17g apart, want %.17g", c.name, i, j, math.Sqrt(kdOracleDist2(c.pts[i], c.pts[j])), d)
		}
		if got := CloudDiameter(c.pts); got != d {
			t.Errorf("%s: CloudDiameter = %v, FarthestPair %v", c.name, got, d)
		}
	}
}

// Benchmarks for the metrics a check computes on every model.

func BenchmarkCloudDiameter(b *testing.B) {
	for _, c := range []struct {
		name string
		gen  func(*rand.Rand, int) []r3.Vec
	}{{"uniform", kdUniformCloud}, {"sphere", metSphereCloud}, {"clustered", kdClusteredCloud}} {
		for _, n := range []int{10_000, 100_000} {
			pts := c.gen(rand.New(rand.NewPCG(27, uint64(n))), n)
			b.Run(fmt.Sprintf("%s/n=%d", c.name, n), func(b *testing.B) {
				for b.Loop() {
					CloudDiameter(pts)
				}
			})
		}
	}
	pts := metSphereCloud(rand.New(rand.NewPCG(28, 1)), 10_000)
	b.Run("brute/sphere/n=10000", func(b *testing.B) {
		for b.Loop() {
			metBruteDiameter(pts)
		}
	})
}

func BenchmarkMeshEdges(b *testing.B) {
	m := metTorus(0.05, 0.015, 512, 256) // 262k faces
	b.Run("IsWatertight/faces=262k", func(b *testing.B) {
		for b.Loop() {
			m.IsWatertight()
		}
	})
	b.Run("Components/faces=262k", func(b *testing.B) {
		for b.Loop() {
			m.Components()
		}
	})
	b.Run("VertexNormals/faces=262k", func(b *testing.B) {
		for b.Loop() {
			m.VertexNormals()
		}
	})
	b.Run("AreaVolume/faces=262k", func(b *testing.B) {
		for b.Loop() {
			m.Area()
			m.SignedVolume()
		}
	})
}

func ExampleMesh_Diameter() {
	// A regular octahedron with vertices ±e_i (edge √2), faces
	// counter-clockwise seen from outside.
	m := &Mesh{
		Vertices: []r3.Vec{{X: 1}, {X: -1}, {Y: 1}, {Y: -1}, {Z: 1}, {Z: -1}},
		Faces: []Face{
			{0, 2, 4}, {2, 1, 4}, {1, 3, 4}, {3, 0, 4},
			{2, 0, 5}, {1, 2, 5}, {3, 1, 5}, {0, 3, 5},
		},
	}
	fmt.Printf("area %.4f (2√3·a² = 4√3), volume %.4f (√2/3·a³ = 4/3), diameter %.1f\n", m.Area(), m.SignedVolume(), m.Diameter())
	fmt.Printf("watertight %v, oriented %v, χ = %d, boundary edges %d\n", m.IsWatertight(), m.IsConsistentlyOriented(), m.EulerCharacteristic(), len(m.BoundaryEdges()))
	b := m.Bounds()
	fmt.Println("bounds", b.Min, b.Max, "centre", b.Center())
	// Output:
	// area 6.9282 (2√3·a² = 4√3), volume 1.3333 (√2/3·a³ = 4/3), diameter 2.0
	// watertight true, oriented true, χ = 2, boundary edges 0
	// bounds {-1 -1 -1} {1 1 1} centre {0 0 0}
}
