package validate

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Opening is one hole in a surface: a closed loop of boundary edges
// (edges used by one face only), with the patch that would close it.
type Opening struct {
	// Edges is the number of boundary edges in the loop and Perimeter
	// their length (metres).
	Edges     int     `json:"edges"`
	Perimeter float64 `json:"perimeter_m"`
	// Area is the area of the patch that closes the loop (a fan of
	// triangles from the loop's mean vertex): the size of the missing
	// surface as far as its rim shows it (m²). A missing region that
	// bulges (a lost cap) has more area than its patch.
	Area float64 `json:"area_m2"`
	// Centroid is the patch's area centroid and Normal its outward unit
	// normal (the direction the missing surface would face; zero when
	// the patch's normals cancel).
	Centroid r3.Vec `json:"centroid_m"`
	Normal   r3.Vec `json:"normal"`
	// MinZ and MaxZ are the heights (part frame z) of the rim's lowest
	// and highest vertex.
	MinZ float64 `json:"min_z_m"`
	MaxZ float64 `json:"max_z_m"`
	// OnSupport reports an opening the part stood on: its whole rim
	// lies on the support (within the tolerance of FindOpenings; the rim
	// of a hole through the resting face too), or its patch faces down
	// (within 45°) and its rim reaches down to the support — the resting
	// face, with whatever unseen underside joins it, which one sweep
	// cannot see.
	// Underside reports another opening whose patch faces down: the
	// underside of an overhang (a port, a flange), which a sweep from
	// above cannot see either. The others are holes.
	OnSupport bool `json:"on_support"`
	Underside bool `json:"underside"`
	// Recessed reports a hole inside a recess (a bore, a deep pocket)
	// that no camera of the sweep could look into: from the patch's
	// centroid, the line of sight to every camera is blocked by the
	// part itself (MarkRecesses). The sweep could not have filled it,
	// and a cell's camera from similar viewpoints sees as little; the
	// check's views that do show the patch are counted apart (see
	// ViewResult.Unscanned).
	Recessed bool `json:"recessed"`
	// Closed is false for a chain of boundary edges that did not return
	// to its start (a non-manifold rim); its patch closes it with a
	// straight edge.
	Closed bool `json:"closed"`

	loop    []uint32
	vecArea r3.Vec // Σ ½(b − a)×(c − a) over the patch's triangles
}

// Openings is what FindOpenings found.
type Openings struct {
	// List holds the openings, largest patch area first.
	List []Opening `json:"openings"`
	// SurfaceArea is the area of the surface (m²).
	SurfaceArea float64 `json:"surface_area_m2"`
	// HoleArea sums the patches of the holes (openings neither on the
	// support nor facing down) and HoleFraction is its share of the
	// closed surface (SurfaceArea + HoleArea + UndersideArea +
	// SupportArea); UndersideArea and UndersideFraction likewise for the
	// undersides.
	HoleArea          float64 `json:"hole_area_m2"`
	HoleFraction      float64 `json:"hole_fraction"`
	UndersideArea     float64 `json:"underside_area_m2"`
	UndersideFraction float64 `json:"underside_fraction"`
	// RecessArea sums the patches of the recessed holes (MarkRecesses),
	// which HoleArea then leaves out; RecessFraction is its share of the
	// closed surface.
	RecessArea     float64 `json:"recess_area_m2"`
	RecessFraction float64 `json:"recess_fraction"`
	// SupportArea is the area of the openings on the support (the face
	// the part stood on): the length of the sum of their patches'
	// vector areas, so that the rim of a hole through the resting face
	// (which runs the other way round) takes its disc off the outline's
	// patch instead of adding it.
	SupportArea float64 `json:"support_area_m2"`
	// SupportZ is the support's height in the part frame (NaN when not
	// known), and SupportGap how far above it the surface's lowest
	// vertex lies (metres; 0 when the surface reaches the support or the
	// support is not known). Height is the surface's extent along z.
	SupportZ   float64 `json:"-"`
	SupportGap float64 `json:"support_gap_m"`
	Height     float64 `json:"height_m"`
}

// FindOpenings traces the boundary loops of m (a surface in its part
// frame, z up, wound outward) and measures the patches that would close
// them. supportZ is the height of the plane the part stood on during
// its sweep (part frame; NaN when unknown); tol the distance within
// which a rim vertex counts as lying on it (0: 2 % of the surface's
// height, at least 3 mm, which allows for the support crop of a fusion,
// 0.75 voxel above the plane, and a voxel of the rim's own wander with
// the default 2 mm voxels).
//
// Loops: every boundary edge is taken in the direction its one face
// runs it; at each vertex the loop continues along an unused outgoing
// boundary edge (the first in vertex order where a non-manifold vertex
// has several). The patch closing a loop is the fan (v_{i+1}, v_i, c)
// around the loop's mean vertex c, which is wound like the rest of the
// surface (the shared edge runs the other way), so its normal points
// outward.
//
// A closed (watertight) surface has no openings. Degenerate input: an
// invalid mesh is an error; a mesh without faces has no openings and
// zero area.
func FindOpenings(m *mesh.Mesh, supportZ, tol float64) (*Openings, error) {
	if m == nil {
		return nil, fmt.Errorf("validate: openings of a nil mesh")
	}
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("validate: openings: %w", err)
	}
	out := &Openings{SurfaceArea: m.Area(), SupportZ: supportZ}
	lo, hi := math.Inf(1), math.Inf(-1)
	used := make([]bool, len(m.Vertices))
	for _, f := range m.Faces {
		for _, v := range f {
			used[v] = true
		}
	}
	for i, v := range m.Vertices {
		if used[i] {
			lo, hi = math.Min(lo, v.Z), math.Max(hi, v.Z)
		}
	}
	if lo > hi {
		return out, nil
	}
	out.Height = hi - lo
	if tol <= 0 {
		tol = math.Max(0.02*out.Height, 0.003)
	}
	if !math.IsNaN(supportZ) {
		out.SupportGap = math.Max(0, lo-supportZ)
		if out.SupportGap <= tol {
			out.SupportGap = 0
		}
	}

	// Directed boundary edges: an undirected edge used once, in its
	// face's direction.
	type dirEdge struct{ a, b uint32 }
	count := make(map[[2]uint32]int, 3*len(m.Faces))
	key := func(a, b uint32) [2]uint32 {
		if a > b {
			a, b = b, a
		}
		return [2]uint32{a, b}
	}
	for _, f := range m.Faces {
		if f[0] == f[1] || f[1] == f[2] || f[0] == f[2] {
			continue
		}
		for k := 0; k < 3; k++ {
			count[key(f[k], f[(k+1)%3])]++
		}
	}
	var edges []dirEdge
	for _, f := range m.Faces {
		if f[0] == f[1] || f[1] == f[2] || f[0] == f[2] {
			continue
		}
		for k := 0; k < 3; k++ {
			a, b := f[k], f[(k+1)%3]
			if count[key(a, b)] == 1 {
				edges = append(edges, dirEdge{a, b})
			}
		}
	}
	sort.Slice(edges, func(i, j int) bool {
		if edges[i].a != edges[j].a {
			return edges[i].a < edges[j].a
		}
		return edges[i].b < edges[j].b
	})
	// Outgoing edges per vertex, in order.
	start := map[uint32]int{}
	for i := len(edges) - 1; i >= 0; i-- {
		start[edges[i].a] = i
	}
	taken := make([]bool, len(edges))
	var supportVec r3.Vec
	next := func(v uint32) int {
		i, ok := start[v]
		if !ok {
			return -1
		}
		for ; i < len(edges) && edges[i].a == v; i++ {
			if !taken[i] {
				return i
			}
		}
		return -1
	}
	for i := range edges {
		if taken[i] {
			continue
		}
		loop := []uint32{edges[i].a}
		taken[i] = true
		cur := edges[i].b
		closed := false
		for len(loop) <= len(edges) {
			if cur == loop[0] {
				closed = true
				break
			}
			loop = append(loop, cur)
			j := next(cur)
			if j < 0 {
				break
			}
			taken[j] = true
			cur = edges[j].b
		}
		op := measureOpening(m, loop)
		op.Closed = closed
		down := op.Normal.Z < -math.Sqrt2/2
		flat := op.MaxZ-supportZ <= tol && op.MinZ-supportZ >= -tol // the whole rim on the support
		op.OnSupport = !math.IsNaN(supportZ) && (flat || (down && math.Abs(op.MinZ-supportZ) <= tol))
		op.Underside = down && !op.OnSupport
		switch {
		case op.OnSupport:
			supportVec = r3.Add(supportVec, op.vecArea)
		case op.Underside:
			out.UndersideArea += op.Area
		default:
			out.HoleArea += op.Area
		}
		out.List = append(out.List, op)
	}
	out.SupportArea = r3.Norm(supportVec)
	sort.SliceStable(out.List, func(i, j int) bool { return out.List[i].Area > out.List[j].Area })
	out.fractions()
	return out, nil
}

// closedArea is the area of the surface with every opening closed.
func (o *Openings) closedArea() float64 {
	return o.SurfaceArea + o.HoleArea + o.RecessArea + o.UndersideArea + o.SupportArea
}

func (o *Openings) fractions() {
	if total := o.closedArea(); total > 0 {
		o.HoleFraction = o.HoleArea / total
		o.UndersideFraction = o.UndersideArea / total
		o.RecessFraction = o.RecessArea / total
	}
}

// MarkRecesses marks the holes that no camera could look into
// (Opening.Recessed) and moves their area from HoleArea to RecessArea.
// m is the surface the openings were found on and cameras the centres
// of the sweep's cameras in the same frame. A hole is recessed when,
// from a point just off its patch's centroid (a hundredth of the
// patch's equivalent diameter along its normal, at least 0.1 mm), the
// segment to every camera in front of the patch crosses a triangle of
// m (Möller & Trumbore 1997 ray–triangle test) — the centre of a bore
// whose sweep looked in more steeply than the bore's walls allow — and
// when no camera lies in front of it, the patch faces away from all.
// An opening without a normal (its patch's normals cancel) is left a
// hole. Cost: openings × cameras × triangles tests, bounded per segment
// by a box test, well under a second for a fused part.
func (o *Openings) MarkRecesses(m *mesh.Mesh, cameras []r3.Vec) {
	if len(cameras) == 0 {
		return
	}
	tris := newTriangleSet(m)
	for i := range o.List {
		op := &o.List[i]
		if op.OnSupport || op.Underside || op.Recessed || r3.Norm(op.Normal) == 0 {
			continue
		}
		off := math.Max(1e-4, 0.01*math.Sqrt(4*op.Area/math.Pi))
		p := r3.Add(op.Centroid, r3.Scale(off, op.Normal))
		seen := false
		for _, c := range cameras {
			if r3.Dot(r3.Sub(c, p), op.Normal) <= 0 {
				continue
			}
			if !tris.blocked(p, c) {
				seen = true
				break
			}
		}
		if !seen {
			op.Recessed = true
			o.HoleArea -= op.Area
			o.RecessArea += op.Area
		}
	}
	if o.HoleArea < 0 {
		o.HoleArea = 0
	}
	o.fractions()
}

// triangleSet holds a mesh's triangles with their bounding boxes for
// segment tests.
type triangleSet struct {
	a, e1, e2 []r3.Vec
	lo, hi    []r3.Vec
}

func newTriangleSet(m *mesh.Mesh) *triangleSet {
	t := &triangleSet{}
	for _, f := range m.Faces {
		a, b, c := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		t.a = append(t.a, a)
		t.e1 = append(t.e1, r3.Sub(b, a))
		t.e2 = append(t.e2, r3.Sub(c, a))
		t.lo = append(t.lo, r3.Vec{X: math.Min(a.X, math.Min(b.X, c.X)), Y: math.Min(a.Y, math.Min(b.Y, c.Y)), Z: math.Min(a.Z, math.Min(b.Z, c.Z))})
		t.hi = append(t.hi, r3.Vec{X: math.Max(a.X, math.Max(b.X, c.X)), Y: math.Max(a.Y, math.Max(b.Y, c.Y)), Z: math.Max(a.Z, math.Max(b.Z, c.Z))})
	}
	return t
}

// blocked reports whether the segment from p to q crosses a triangle
// (at a parameter strictly inside (0, 1)): the Möller–Trumbore test,
// which solves p + s·(q − p) = a + u·e1 + v·e2 by Cramer's rule.
func (t *triangleSet) blocked(p, q r3.Vec) bool {
	d := r3.Sub(q, p)
	slo := r3.Vec{X: math.Min(p.X, q.X), Y: math.Min(p.Y, q.Y), Z: math.Min(p.Z, q.Z)}
	shi := r3.Vec{X: math.Max(p.X, q.X), Y: math.Max(p.Y, q.Y), Z: math.Max(p.Z, q.Z)}
	for i := range t.a {
		lo, hi := t.lo[i], t.hi[i]
		if hi.X < slo.X || lo.X > shi.X || hi.Y < slo.Y || lo.Y > shi.Y || hi.Z < slo.Z || lo.Z > shi.Z {
			continue
		}
		h := r3.Cross(d, t.e2[i])
		det := r3.Dot(t.e1[i], h)
		if math.Abs(det) < 1e-18 {
			continue // the segment runs parallel to the triangle
		}
		inv := 1 / det
		sv := r3.Sub(p, t.a[i])
		u := inv * r3.Dot(sv, h)
		if u < 0 || u > 1 {
			continue
		}
		qv := r3.Cross(sv, t.e1[i])
		v := inv * r3.Dot(d, qv)
		if v < 0 || u+v > 1 {
			continue
		}
		if s := inv * r3.Dot(t.e2[i], qv); s > 1e-9 && s < 1-1e-9 {
			return true
		}
	}
	return false
}

// measureOpening measures the fan patch of one boundary loop (the loop
// runs the way the surface's faces run its edges).
func measureOpening(m *mesh.Mesh, loop []uint32) Opening {
	op := Opening{Edges: len(loop), loop: loop, MinZ: math.Inf(1), MaxZ: math.Inf(-1)}
	var c r3.Vec
	for i, v := range loop {
		p := m.Vertices[v]
		c = r3.Add(c, p)
		op.MinZ, op.MaxZ = math.Min(op.MinZ, p.Z), math.Max(op.MaxZ, p.Z)
		q := m.Vertices[loop[(i+1)%len(loop)]]
		op.Perimeter += r3.Norm(r3.Sub(q, p))
	}
	c = r3.Scale(1/float64(len(loop)), c)
	var nsum, csum r3.Vec
	for i := range loop {
		a := m.Vertices[loop[(i+1)%len(loop)]]
		b := m.Vertices[loop[i]]
		n := r3.Cross(r3.Sub(b, a), r3.Sub(c, a)) // (a, b, c) = (v_{i+1}, v_i, c)
		ar := r3.Norm(n) / 2
		op.Area += ar
		nsum = r3.Add(nsum, r3.Scale(0.5, n))
		csum = r3.Add(csum, r3.Scale(ar/3, r3.Add(r3.Add(a, b), c)))
	}
	if op.Area > 0 {
		op.Centroid = r3.Scale(1/op.Area, csum)
	} else {
		op.Centroid = c
	}
	op.vecArea = nsum
	if r3.Norm(nsum) > 1e-3*op.Area {
		op.Normal = mesh.Normalize(nsum)
	}
	return op
}

// PatchedMesh returns a copy of m with the patches of the openings
// added as faces of their own vertices, coloured patchColor (the rest
// keeps m's colours, or modelColor where m has none): a picture of
// what is missing.
func (o *Openings) PatchedMesh(m *mesh.Mesh, modelColor, patchColor mesh.RGB) *mesh.Mesh {
	out := m.Clone()
	out.Normals = nil
	if out.Colors == nil {
		out.Colors = make([]mesh.RGB, len(out.Vertices))
		for i := range out.Colors {
			out.Colors[i] = modelColor
		}
	}
	for _, op := range o.List {
		base := uint32(len(out.Vertices))
		for _, v := range op.loop {
			out.Vertices = append(out.Vertices, m.Vertices[v])
			out.Colors = append(out.Colors, patchColor)
		}
		var c r3.Vec
		for _, v := range op.loop {
			c = r3.Add(c, m.Vertices[v])
		}
		out.Vertices = append(out.Vertices, r3.Scale(1/float64(len(op.loop)), c))
		out.Colors = append(out.Colors, patchColor)
		ci := uint32(len(out.Vertices) - 1)
		n := uint32(len(op.loop))
		for i := uint32(0); i < n; i++ {
			out.Faces = append(out.Faces, mesh.Face{base + (i+1)%n, base + i, ci})
		}
	}
	return out
}
