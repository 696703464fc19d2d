package mesh

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"
)

// Metrics assume m.Validate() == nil: a face index out of range is a
// programmer error and panics. Faces with a repeated vertex index are
// "degenerate" below; they add nothing to area, volume or normals and
// are skipped by the topology queries (edges, watertightness, Euler
// characteristic).

// Box is an axis-aligned bounding box. Unlike gonum's r3.Box, a Box with
// Min == Max is not empty: it bounds one point. The empty box (from
// EmptyBox, bounding nothing) has Min > Max on every axis; the zero Box
// is the box of the single point at the origin.
type Box struct {
	Min, Max r3.Vec
}

// EmptyBox returns the box that bounds nothing: Min = +Inf, Max = −Inf,
// so that extending it by a point gives that point's box.
func EmptyBox() Box {
	inf := math.Inf(1)
	return Box{Min: r3.Vec{X: inf, Y: inf, Z: inf}, Max: r3.Vec{X: -inf, Y: -inf, Z: -inf}}
}

// Empty reports whether b bounds no point (Min > Max on some axis).
func (b Box) Empty() bool {
	return b.Min.X > b.Max.X || b.Min.Y > b.Max.Y || b.Min.Z > b.Max.Z
}

// Extend returns the smallest box holding b and p. Points with a NaN or
// infinite coordinate leave b unchanged.
func (b Box) Extend(p r3.Vec) Box {
	if !isFinite(p) {
		return b
	}
	return Box{
		Min: r3.Vec{X: min(b.Min.X, p.X), Y: min(b.Min.Y, p.Y), Z: min(b.Min.Z, p.Z)},
		Max: r3.Vec{X: max(b.Max.X, p.X), Y: max(b.Max.Y, p.Y), Z: max(b.Max.Z, p.Z)},
	}
}

// Union returns the smallest box holding a and b.
func (b Box) Union(o Box) Box {
	if b.Empty() {
		return o
	}
	if o.Empty() {
		return b
	}
	return Box{
		Min: r3.Vec{X: min(b.Min.X, o.Min.X), Y: min(b.Min.Y, o.Min.Y), Z: min(b.Min.Z, o.Min.Z)},
		Max: r3.Vec{X: max(b.Max.X, o.Max.X), Y: max(b.Max.Y, o.Max.Y), Z: max(b.Max.Z, o.Max.Z)},
	}
}

// Size returns Max − Min, or the zero vector for an empty box.
func (b Box) Size() r3.Vec {
	if b.Empty() {
		return r3.Vec{}
	}
	return r3.Sub(b.Max, b.Min)
}

// Center returns the midpoint of b, or the origin for an empty box.
func (b Box) Center() r3.Vec {
	if b.Empty() {
		return r3.Vec{}
	}
	return r3.Scale(0.5, r3.Add(b.Min, b.Max))
}

// Diagonal returns the length of b's diagonal, 0 for an empty box.
func (b Box) Diagonal() float64 { return r3.Norm(b.Size()) }

// Contains reports whether p lies in b, boundary included.
func (b Box) Contains(p r3.Vec) bool {
	return p.X >= b.Min.X && p.X <= b.Max.X &&
		p.Y >= b.Min.Y && p.Y <= b.Max.Y &&
		p.Z >= b.Min.Z && p.Z <= b.Max.Z
}

// BoxOf returns the bounding box of the finite points among points
// (EmptyBox when there are none).
func BoxOf(points []r3.Vec) Box {
	b := EmptyBox()
	for _, p := range points {
		b = b.Extend(p)
	}
	return b
}

// Bounds returns the bounding box of all of m's vertices, referenced by
// a face or not.
func (m *Mesh) Bounds() Box { return BoxOf(m.Vertices) }

// Bounds returns the bounding box of c's points.
func (c *Cloud) Bounds() Box { return BoxOf(c.Points) }

// degenerateIndex reports whether f repeats a vertex index.
func degenerateIndex(f Face) bool { return f[0] == f[1] || f[1] == f[2] || f[0] == f[2] }

// faceCross returns (b − a) × (c − a) for face f: twice its area times
// its unit normal.
func (m *Mesh) faceCross(f Face) r3.Vec {
	a, b, c := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
	return r3.Cross(r3.Sub(b, a), r3.Sub(c, a))
}

// FaceAreas returns the area of every face, in face order (0 for
// degenerate faces).
func (m *Mesh) FaceAreas() []float64 {
	out := make([]float64, len(m.Faces))
	for i, f := range m.Faces {
		if !degenerateIndex(f) {
			out[i] = 0.5 * r3.Norm(m.faceCross(f))
		}
	}
	return out
}

// Area returns the total surface area: the sum of ½‖(b−a)×(c−a)‖ over
// the faces.
func (m *Mesh) Area() float64 {
	var sum float64
	for _, f := range m.Faces {
		if !degenerateIndex(f) {
			sum += 0.5 * r3.Norm(m.faceCross(f))
		}
	}
	return sum
}

// SignedVolume returns the volume enclosed by m by the divergence
// theorem: the sum over faces of the signed volumes a·(b×c)/6 of the
// tetrahedra each face spans with an origin. It is positive when the
// faces are counter-clockwise seen from outside (outward normals) and
// negative when they all face inward. For a closed mesh the result does
// not depend on the origin; the centre of the bounding box is used,
// which keeps the products small and the rounding error low for a part
// far from the world origin. For an open mesh the value is that of the
// cone from the bounding-box centre over the surface, which is
// translation-invariant but is not a volume of anything physical.
func (m *Mesh) SignedVolume() float64 {
	o := m.Bounds().Center()
	var sum float64
	for _, f := range m.Faces {
		if degenerateIndex(f) {
			continue
		}
		a := r3.Sub(m.Vertices[f[0]], o)
		b := r3.Sub(m.Vertices[f[1]], o)
		c := r3.Sub(m.Vertices[f[2]], o)
		sum += r3.Dot(a, r3.Cross(b, c))
	}
	return sum / 6
}

// VertexNormals returns one unit normal per vertex: the sum of the
// normals of the faces around it weighted by their areas, normalised
// (the zero vector for a vertex in no face of non-zero area). It does
// not change m; assign the result to m.Normals to keep it.
func (m *Mesh) VertexNormals() []r3.Vec {
	out := make([]r3.Vec, len(m.Vertices))
	for _, f := range m.Faces {
		if degenerateIndex(f) {
			continue
		}
		// The cross product's length is twice the face area, so adding it
		// weights the unit face normal by area.
		n := m.faceCross(f)
		for _, v := range f {
			out[v] = r3.Add(out[v], n)
		}
	}
	for i, n := range out {
		out[i] = Normalize(n)
	}
	return out
}

// CloudDiameter returns the largest distance between two of points
// (ignoring points with a NaN or infinite coordinate), 0 for fewer than
// two. See FarthestPair.
func CloudDiameter(points []r3.Vec) float64 {
	_, _, d := FarthestPair(points)
	return d
}

// Diameter returns the largest distance between two of m's vertices,
// referenced by a face or not (remove unreferenced vertices first if
// they should not count). It is exact; see FarthestPair.
func (m *Mesh) Diameter() float64 { return CloudDiameter(m.Vertices) }

// FarthestPair returns the indices i < j of two points at the largest
// distance from each other and that distance, the diameter of the set.
// Points with a NaN or infinite coordinate are ignored; with fewer than
// two finite points it returns (−1, −1, 0).
//
// The result is exact, not approximate. Method: a lower bound from the
// iterated farthest-point walk (from a point, go to the point farthest
// from it, and repeat while the distance grows; it stops at a "double
// normal" pair, as in Malandain & Boissonnat 2002, "Computing the
// diameter of a point set", IJCGA 12(6), doi:10.1142/S0218195902001006),
// then a branch-and-bound over pairs of k-d tree cells: a pair of cells
// is dropped when the largest distance between their bounding boxes is
// not larger than the best distance found, and pairs of leaves are
// compared point by point. Because the box bound is never smaller than
// the distance of any pair of points inside (per axis the largest gap
// between the boxes bounds every coordinate difference, and rounding is
// monotone), no pair that could be farther is ever dropped, so the
// answer equals the brute-force maximum over all pairs. The walk's pair
// is usually the diameter or within a fraction of a percent of it, so
// few cell pairs survive for compact shapes. The hard case is many
// pairs near the diameter, as for points spread over a sphere or two
// circular rims: the box bound exceeds the true distances by about the
// cell size while distances fall off only quadratically away from an
// antipodal pair, so the number of surviving cell pairs grows like
// n^1.5 there (BenchmarkCloudDiameter measures both kinds).
func FarthestPair(points []r3.Vec) (i, j int, dist float64) {
	return farthestPair(points, true)
}

// farthestPair is FarthestPair; without the walk the search starts from
// the pair of the first two tree slots (tests use it to exercise the
// branch-and-bound alone).
func farthestPair(points []r3.Vec, walk bool) (i, j int, dist float64) {
	t := NewKDTree(points)
	n := t.Len()
	if n < 2 {
		return -1, -1, 0
	}
	d := diameterSearch{t: t}
	if walk {
		d.initialPair()
	} else {
		c := t.coords
		d.bi, d.bj, d.best = 0, 1, sq3(c[3]-c[0], c[4]-c[1], c[5]-c[2])
	}
	d.cellBoxes()
	d.pair(0, 0)
	a, b := int(t.index[d.bi]), int(t.index[d.bj])
	if a > b {
		a, b = b, a
	}
	return a, b, math.Sqrt(d.best)
}

// diameterSearch is the state of one FarthestPair computation over the
// tree's points (indices are tree slots, not input indices).
type diameterSearch struct {
	t      *KDTree
	boxes  []float64 // per node of the complete tree (internal and leaves): min xyz, max xyz
	ranges []int32   // per node: the slot range lo, hi
	best   float64   // best squared distance found
	bi, bj int       // its tree slots
	leaf0  int       // node number of the first leaf
}

func (d *diameterSearch) point(slot int) (x, y, z float64) {
	c := d.t.coords
	return c[3*slot], c[3*slot+1], c[3*slot+2]
}

// farthestFrom returns the slot other than s farthest from slot s
// (smallest slot on ties) and its squared distance; the tree holds at
// least two points.
func (d *diameterSearch) farthestFrom(s int) (int, float64) {
	x, y, z := d.point(s)
	c := d.t.coords
	far, farD := -1, -1.0
	for k := 0; k < d.t.Len(); k++ {
		dd := sq3(c[3*k]-x, c[3*k+1]-y, c[3*k+2]-z)
		if k != s && dd > farD {
			far, farD = k, dd
		}
	}
	return far, farD
}

// initialPair walks from the point of smallest x to the farthest point
// and on while the distance grows (at most 16 steps; each step is one
// linear scan). The last pair is the starting lower bound.
func (d *diameterSearch) initialPair() {
	c := d.t.coords
	start := 0
	for k := 1; k < d.t.Len(); k++ {
		if c[3*k] < c[3*start] {
			start = k
		}
	}
	a := start
	b, bd := d.farthestFrom(a)
	d.bi, d.bj, d.best = a, b, bd
	for step := 0; step < 16; step++ {
		nb, nd := d.farthestFrom(b)
		if nd <= d.best {
			break
		}
		a, b = b, nb
		d.bi, d.bj, d.best = a, b, nd
	}
}

// cellBoxes computes the slot range and the tight bounding box of every
// node's points, leaves by scanning and internal nodes as the union of
// their children.
func (d *diameterSearch) cellBoxes() {
	t := d.t
	nodes := 1<<(t.depth+1) - 1
	d.leaf0 = 1<<t.depth - 1
	d.boxes = make([]float64, 6*nodes)
	d.ranges = make([]int32, 2*nodes)
	var fill func(node, lo, hi, level int)
	fill = func(node, lo, hi, level int) {
		d.ranges[2*node], d.ranges[2*node+1] = int32(lo), int32(hi)
		bx := d.boxes[6*node : 6*node+6]
		if level == t.depth {
			inf := math.Inf(1)
			bx[0], bx[1], bx[2], bx[3], bx[4], bx[5] = inf, inf, inf, -inf, -inf, -inf
			for k := lo; k < hi; k++ {
				for a := 0; a < 3; a++ {
					v := t.coords[3*k+a]
					bx[a] = min(bx[a], v)
					bx[3+a] = max(bx[3+a], v)
				}
			}
			return
		}
		mid := lo + (hi-lo)/2
		l, r := 2*node+1, 2*node+2
		fill(l, lo, mid, level+1)
		fill(r, mid, hi, level+1)
		lb, rb := d.boxes[6*l:6*l+6], d.boxes[6*r:6*r+6]
		for a := 0; a < 3; a++ {
			bx[a] = min(lb[a], rb[a])
			bx[3+a] = max(lb[3+a], rb[3+a])
		}
	}
	fill(0, 0, t.Len(), 0)
}

// maxDist2 returns the squared largest distance between boxes of nodes
// a and b, computed with the rounding of sq3 so it is never below a
// computed point distance; −Inf if either box is empty.
func (d *diameterSearch) maxDist2(a, b int) float64 {
	p, q := d.boxes[6*a:6*a+6], d.boxes[6*b:6*b+6]
	if p[0] > p[3] || q[0] > q[3] {
		return math.Inf(-1)
	}
	dx := max(p[3]-q[0], q[3]-p[0])
	dy := max(p[4]-q[1], q[4]-p[1])
	dz := max(p[5]-q[2], q[5]-p[2])
	return sq3(dx, dy, dz)
}

// pair searches the pairs of points with one in node a and one in node
// b (a == b: pairs within one node).
func (d *diameterSearch) pair(a, b int) {
	if d.maxDist2(a, b) <= d.best {
		return
	}
	aLeaf, bLeaf := a >= d.leaf0, b >= d.leaf0
	if aLeaf && bLeaf {
		alo, ahi := int(d.ranges[2*a]), int(d.ranges[2*a+1])
		blo, bhi := int(d.ranges[2*b]), int(d.ranges[2*b+1])
		c := d.t.coords
		bb := d.boxes[6*b : 6*b+6]
		for i := alo; i < ahi; i++ {
			x, y, z := c[3*i], c[3*i+1], c[3*i+2]
			// Skip the point when even the far corner of b's box is not
			// farther than the best pair.
			if sq3(max(x-bb[0], bb[3]-x), max(y-bb[1], bb[4]-y), max(z-bb[2], bb[5]-z)) <= d.best {
				continue
			}
			j0 := blo
			if a == b {
				j0 = i + 1
			}
			for j := j0; j < bhi; j++ {
				if dd := sq3(c[3*j]-x, c[3*j+1]-y, c[3*j+2]-z); dd > d.best {
					d.best, d.bi, d.bj = dd, i, j
				}
			}
		}
		return
	}
	if a == b {
		l, r := 2*a+1, 2*a+2
		d.pair(l, r) // the cross pair holds the farthest points most often
		d.pair(l, l)
		d.pair(r, r)
		return
	}
	// Split the node with the larger box (a leaf never splits).
	split := a
	if aLeaf || (!bLeaf && d.diag2(b) > d.diag2(a)) {
		split = b
	}
	other := a + b - split
	l, r := 2*split+1, 2*split+2
	if d.maxDist2(l, other) < d.maxDist2(r, other) {
		l, r = r, l
	}
	d.pair(l, other)
	d.pair(r, other)
}

func (d *diameterSearch) diag2(node int) float64 {
	p := d.boxes[6*node : 6*node+6]
	return sq3(p[3]-p[0], p[4]-p[1], p[5]-p[2])
}

// Edge is an undirected mesh edge, its vertex indices in ascending
// order: Edge[0] < Edge[1].
type Edge [2]uint32

// EdgeUse is an edge with the number of faces that use it: 1 on a
// boundary, 2 inside an edge-manifold surface, more at a non-manifold
// edge. Forward counts the faces that run along it from Edge[0] to
// Edge[1]; on a consistently oriented surface an inner edge has
// Forward == 1 (its two faces run along it in opposite directions).
type EdgeUse struct {
	Edge    Edge
	Faces   int
	Forward int
}

// maxEdgeVertex bounds the vertex indices that the edge analysis can
// pack into one 64-bit key (two 31-bit indices and a direction bit).
const maxEdgeVertex = 1<<31 - 1

// Edges returns every edge of the non-degenerate faces with its use
// counts, sorted by (Edge[0], Edge[1]). It panics for a mesh of more
// than 2³¹−1 vertices.
func (m *Mesh) Edges() []EdgeUse {
	var out []EdgeUse
	m.forEachEdge(func(e EdgeUse) { out = append(out, e) })
	return out
}

// forEachEdge calls fn for each edge of the non-degenerate faces in
// ascending order.
func (m *Mesh) forEachEdge(fn func(EdgeUse)) {
	if len(m.Vertices) > maxEdgeVertex {
		panic(fmt.Sprintf("mesh: edge analysis of %d vertices, more than %d", len(m.Vertices), maxEdgeVertex))
	}
	// key = lo<<33 | hi<<1 | forward, so that sorting groups each edge's
	// uses together.
	keys := make([]uint64, 0, 3*len(m.Faces))
	for _, f := range m.Faces {
		if degenerateIndex(f) {
			continue
		}
		for k := 0; k < 3; k++ {
			a, b := uint64(f[k]), uint64(f[(k+1)%3])
			if a < b {
				keys = append(keys, a<<33|b<<1|1)
			} else {
				keys = append(keys, b<<33|a<<1)
			}
		}
	}
	slices.Sort(keys)
	for i := 0; i < len(keys); {
		e := keys[i] >> 1
		u := EdgeUse{Edge: Edge{uint32(e >> 32), uint32(e & (1<<32 - 1))}}
		for ; i < len(keys) && keys[i]>>1 == e; i++ {
			u.Faces++
			u.Forward += int(keys[i] & 1)
		}
		fn(u)
	}
}

// BoundaryEdges returns the edges used by exactly one face, sorted.
func (m *Mesh) BoundaryEdges() []Edge {
	var out []Edge
	m.forEachEdge(func(e EdgeUse) {
		if e.Faces == 1 {
			out = append(out, e.Edge)
		}
	})
	return out
}

// NonManifoldEdges returns the edges used by more than two faces,
// sorted.
func (m *Mesh) NonManifoldEdges() []Edge {
	var out []Edge
	m.forEachEdge(func(e EdgeUse) {
		if e.Faces > 2 {
			out = append(out, e.Edge)
		}
	})
	return out
}

// BoundaryLength returns the total length of the boundary edges: the
// perimeter of the mesh's holes and open borders.
func (m *Mesh) BoundaryLength() float64 {
	var sum float64
	m.forEachEdge(func(e EdgeUse) {
		if e.Faces == 1 {
			sum += r3.Norm(r3.Sub(m.Vertices[e.Edge[1]], m.Vertices[e.Edge[0]]))
		}
	})
	return sum
}

// IsWatertight reports whether m is closed and edge-manifold: it has at
// least one non-degenerate face and every edge is used by exactly two
// faces. It does not check orientation (see IsConsistentlyOriented) or
// self-intersection.
func (m *Mesh) IsWatertight() bool {
	ok, seen := true, false
	m.forEachEdge(func(e EdgeUse) {
		seen = true
		if e.Faces != 2 {
			ok = false
		}
	})
	return ok && seen
}

// IsConsistentlyOriented reports whether every edge used by two faces is
// traversed by them in opposite directions and no edge is used by more
// than two faces, so that all face normals agree on one side of the
// surface. Boundary edges are allowed. SignedVolume's sign is meaningful
// only for a watertight, consistently oriented mesh.
func (m *Mesh) IsConsistentlyOriented() bool {
	ok := true
	m.forEachEdge(func(e EdgeUse) {
		if e.Faces > 2 || (e.Faces == 2 && e.Forward != 1) {
			ok = false
		}
	})
	return ok
}

// EulerCharacteristic returns V − E + F over the non-degenerate faces,
// their edges and the vertices they reference (unreferenced vertices do
// not count). A closed orientable surface of genus g has 2 − 2g: 2 for
// a sphere, 0 for a torus.
func (m *Mesh) EulerCharacteristic() int {
	used := make([]bool, len(m.Vertices))
	v, f := 0, 0
	for _, fc := range m.Faces {
		if degenerateIndex(fc) {
			continue
		}
		f++
		for _, i := range fc {
			if !used[i] {
				used[i] = true
				v++
			}
		}
	}
	e := 0
	m.forEachEdge(func(EdgeUse) { e++ })
	return v - e + f
}

// Components labels the faces by connected component, two faces being
// connected when they share a vertex (directly or through other faces).
// labels[i] is the component of face i, numbered 0, 1, … in order of
// each component's first face; count is the number of components.
// Every face, degenerate or not, gets a label.
func (m *Mesh) Components() (labels []int, count int) {
	parent := make([]int32, len(m.Vertices))
	for i := range parent {
		parent[i] = int32(i)
	}
	find := func(x int32) int32 {
		for parent[x] != x {
			parent[x] = parent[parent[x]] // path halving
			x = parent[x]
		}
		return x
	}
	for _, f := range m.Faces {
		r0 := find(int32(f[0]))
		for _, v := range f[1:] {
			if r := find(int32(v)); r != r0 {
				// Attach the larger root under the smaller: deterministic,
				// and path halving keeps the trees shallow.
				if r < r0 {
					parent[r0] = r
					r0 = r
				} else {
					parent[r] = r0
				}
			}
		}
	}
	labels = make([]int, len(m.Faces))
	for i, f := range m.Faces {
		labels[i] = int(find(int32(f[0])))
	}
	// With every root found, reuse parent as the root → label table: a
	// root's entry is itself until it is labelled, then −1 − label.
	for i, r := range labels {
		if parent[r] == int32(r) {
			parent[r] = int32(-1 - count)
			count++
		}
		labels[i] = int(-1 - parent[r])
	}
	return labels, count
}
