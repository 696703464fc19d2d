package mesh

// This file builds, at first use, the marching-cubes case table: for
// every corner-sign case of a cell and every outcome of the asymptotic
// decider on its ambiguous faces, the triangles as triples of cell-edge
// ids. The table is computed here from the cell's geometry, not
// transcribed from any published table.
//
// Method (our own construction on the ideas of Lorensen & Cline 1987,
// "Marching cubes: a high resolution 3D surface construction
// algorithm", SIGGRAPH, doi:10.1145/37402.37422, and Nielson & Hamann
// 1991, "The asymptotic decider: resolving the ambiguity in marching
// cubes", IEEE Visualization '91; doi:10.1109/VISUAL.1991.175782,
// recalled from memory):
//
//  1. On each of the six faces, the crossed edges are paired into
//     segments. A face with two crossed edges has one segment. A face
//     with four (the two inside corners diagonal) is ambiguous; the
//     asymptotic decider says whether its inside corners are joined
//     across the face (the saddle of the bilinear interpolant is
//     inside), and the segments then cut off the two outside corners,
//     or not, and the segments cut off the two inside corners.
//  2. Each segment is oriented so that, seen from outside the cell, the
//     inside corners lie on its right.
//  3. Every crossed edge lies on exactly two faces, so it ends one
//     segment and starts another: the segments chain into closed loops.
//  4. Each loop is triangulated with diagonals that never join two
//     vertices lying on a common cell face (such a diagonal could be
//     produced by the neighbouring cell too, making an edge with four
//     triangles); among the allowed triangulations the one with the
//     least total diagonal length (vertices at the edge midpoints) is
//     kept. With the loop orientation of step 2 the triangles are
//     counter-clockwise seen from outside (normal toward increasing
//     value).
//
// Interior (cell-body) ambiguity is left to this face-consistent rule:
// each loop becomes its own disk, so two inside corners that are joined
// only through the cell body (and not across any face) stay separate.

import (
	"fmt"
	"math"
	"sync"
)

// Cell corners are numbered c = x + 2y + 4z, x, y, z ∈ {0, 1} being the
// corner's offset from the cell's minimum corner.

// mcEdge is one of the 12 cell edges: from corner c0 to c1 = c0 + the
// unit step along axis.
type mcEdge struct{ c0, c1, axis uint8 }

// mcFace is one of the 6 cell faces, f = 2·axis + side (side 0 at the
// cell's minimum along axis). q are its corners in cyclic order
// q00, q10, q11, q01 over the two other axes (u < v); e[i] is the edge
// from q[i] to q[i+1 mod 4].
type mcFace struct {
	axis, side uint8
	q          [4]uint8
	e          [4]uint8
}

// mcGeom holds the cell's combinatorics.
type mcGeom struct {
	edges     [12]mcEdge
	faces     [6]mcFace
	edgeOf    [8][8]int8 // edge id between two corners, −1 if none
	shareFace [12][12]bool
}

// otherAxes returns the two axes other than a, in increasing order.
func otherAxes(a int) (u, v int) {
	switch a {
	case 0:
		return 1, 2
	case 1:
		return 0, 2
	}
	return 0, 1
}

func newMCGeom() *mcGeom {
	g := &mcGeom{}
	for i := range g.edgeOf {
		for j := range g.edgeOf[i] {
			g.edgeOf[i][j] = -1
		}
	}
	// Edge e: axis e/4; its 2-bit index r = e%4 gives the offsets along
	// the two other axes (bit 0 along u, bit 1 along v).
	for e := 0; e < 12; e++ {
		a := e / 4
		r := e % 4
		u, v := otherAxes(a)
		c0 := (r&1)<<u | (r>>1)<<v
		c1 := c0 | 1<<a
		g.edges[e] = mcEdge{uint8(c0), uint8(c1), uint8(a)}
		g.edgeOf[c0][c1] = int8(e)
		g.edgeOf[c1][c0] = int8(e)
	}
	for f := 0; f < 6; f++ {
		a, s := f/2, f%2
		u, v := otherAxes(a)
		q00 := s << a
		q := [4]int{q00, q00 | 1<<u, q00 | 1<<u | 1<<v, q00 | 1<<v}
		fc := mcFace{axis: uint8(a), side: uint8(s)}
		for i := 0; i < 4; i++ {
			fc.q[i] = uint8(q[i])
			fc.e[i] = uint8(g.edgeOf[q[i]][q[(i+1)%4]])
		}
		g.faces[f] = fc
		for i := 0; i < 4; i++ {
			for j := 0; j < 4; j++ {
				if i != j {
					g.shareFace[fc.e[i]][fc.e[j]] = true
				}
			}
		}
	}
	return g
}

// cornerPos returns corner c's offset from the cell's minimum corner.
func cornerPos(c int) [3]float64 {
	return [3]float64{float64(c & 1), float64(c >> 1 & 1), float64(c >> 2 & 1)}
}

func (g *mcGeom) edgeMid(e int) [3]float64 {
	p, q := cornerPos(int(g.edges[e].c0)), cornerPos(int(g.edges[e].c1))
	return [3]float64{(p[0] + q[0]) / 2, (p[1] + q[1]) / 2, (p[2] + q[2]) / 2}
}

// ambiguousFaces returns the bit mask of the faces of case cs (bit c set
// when corner c is inside) that have four crossed edges.
func (g *mcGeom) ambiguousFaces(cs int) uint8 {
	var m uint8
	for f, fc := range g.faces {
		in := func(i int) bool { return cs>>fc.q[i]&1 == 1 }
		if in(0) == in(2) && in(1) == in(3) && in(0) != in(1) {
			m |= 1 << f
		}
	}
	return m
}

// crossedEdges returns the 12-bit mask of the edges of case cs whose two
// corners lie on different sides.
func (g *mcGeom) crossedEdges(cs int) uint16 {
	var m uint16
	for e, ed := range g.edges {
		if cs>>ed.c0&1 != cs>>ed.c1&1 {
			m |= 1 << e
		}
	}
	return m
}

// mcCentre is the id, in table triangles, of a loop's extra centre
// vertex (mcCentre+k for the k-th such loop of a cell); ids below it are
// cell edges.
const (
	mcCentre     = 12
	mcMaxCentres = 1
)

// mcCell is the surface of one cell configuration.
type mcCell struct {
	tris    [][3]uint8 // edge ids, or mcCentre+k
	loops   [][]uint8  // the boundary loops, as edge ids in order
	centres []uint16   // per centre vertex, the mask of its loop's edges
}

// cellTriangles computes, from first principles (steps 1–4 above), the
// triangles of a cell with corner case cs and asymptotic-decider
// outcomes joined (bit f set: face f's inside corners are joined; read
// only for ambiguous faces). It returns the triangles as edge-id triples
// and the loops they came from. It returns an error only if the
// construction breaks its own invariants (a bug).
func (g *mcGeom) cellTriangles(cs int, joined uint8) (mcCell, error) {
	var tris [][3]uint8
	var loops [][]uint8
	var centres []uint16
	var err error
	next := [12]int8{}
	prev := [12]int8{}
	for i := range next {
		next[i], prev[i] = -1, -1
	}
	link := func(a, b uint8) error {
		if next[a] != -1 || prev[b] != -1 {
			return fmt.Errorf("mesh: marching-cubes table: case %#02x edge %d or %d linked twice", cs, a, b)
		}
		next[a], prev[b] = int8(b), int8(a)
		return nil
	}
	inside := func(c uint8) bool { return cs>>c&1 == 1 }
	for f, fc := range g.faces {
		// Outward normal of the face.
		var n [3]float64
		if fc.side == 1 {
			n[fc.axis] = 1
		} else {
			n[fc.axis] = -1
		}
		var crossed []int // indices i into fc.e
		for i := 0; i < 4; i++ {
			if inside(fc.q[i]) != inside(fc.q[(i+1)%4]) {
				crossed = append(crossed, i)
			}
		}
		type seg struct {
			a, b uint8 // edge ids
			ref  uint8 // a corner whose side fixes the orientation
			in   bool  // whether ref must lie on the right (inside) or left
		}
		var segs []seg
		switch len(crossed) {
		case 0:
		case 2:
			var ref uint8
			for i := 0; i < 4; i++ {
				if inside(fc.q[i]) {
					ref = fc.q[i]
					break
				}
			}
			segs = append(segs, seg{fc.e[crossed[0]], fc.e[crossed[1]], ref, true})
		case 4:
			// Corner q[i] lies between edges e[i-1] and e[i].
			cutInside := joined>>f&1 == 0
			for i := 0; i < 4; i++ {
				if inside(fc.q[i]) == cutInside {
					segs = append(segs, seg{fc.e[(i+3)%4], fc.e[i], fc.q[i], cutInside})
				}
			}
		default:
			return mcCell{}, fmt.Errorf("mesh: marching-cubes table: face %d has %d crossings", f, len(crossed))
		}
		for _, s := range segs {
			A, B := g.edgeMid(int(s.a)), g.edgeMid(int(s.b))
			Q := cornerPos(int(s.ref))
			d := sub3(B, A)
			right := cross3(d, n) // right of d seen from outside (along −n)
			side := dot3(sub3(Q, A), right)
			if side == 0 {
				return mcCell{}, fmt.Errorf("mesh: marching-cubes table: corner on segment")
			}
			if (side > 0) == s.in {
				err = link(s.a, s.b)
			} else {
				err = link(s.b, s.a)
			}
			if err != nil {
				return mcCell{}, err
			}
		}
	}
	crossedMask := g.crossedEdges(cs)
	var seen uint16
	for e := 0; e < 12; e++ {
		if crossedMask>>e&1 == 0 {
			if next[e] != -1 || prev[e] != -1 {
				return mcCell{}, fmt.Errorf("mesh: marching-cubes table: case %#02x uncrossed edge %d linked", cs, e)
			}
			continue
		}
		if next[e] == -1 || prev[e] == -1 {
			return mcCell{}, fmt.Errorf("mesh: marching-cubes table: case %#02x edge %d open", cs, e)
		}
		if seen>>e&1 == 1 {
			continue
		}
		var loop []uint8
		for x := e; seen>>x&1 == 0; x = int(next[x]) {
			seen |= 1 << x
			loop = append(loop, uint8(x))
		}
		if len(loop) < 3 {
			return mcCell{}, fmt.Errorf("mesh: marching-cubes table: case %#02x loop of %d", cs, len(loop))
		}
		t, ok := g.triangulateLoop(loop)
		if !ok {
			// Fan around an extra vertex at the loop's mean, id
			// mcCentre + the number of such loops so far.
			c := uint8(mcCentre + len(centres))
			if len(centres) == mcMaxCentres {
				return mcCell{}, fmt.Errorf("mesh: marching-cubes table: case %#02x joined %#02x: more than %d centre vertices", cs, joined, mcMaxCentres)
			}
			var m uint16
			for i, e := range loop {
				m |= 1 << e
				t = append(t, [3]uint8{c, e, loop[(i+1)%len(loop)]})
			}
			centres = append(centres, m)
		}
		loops = append(loops, loop)
		tris = append(tris, t...)
	}
	return mcCell{tris, loops, centres}, nil
}

// triangulateLoop triangulates the polygon loop (edge ids in order)
// without any diagonal joining two edges of a common face, minimising
// the total diagonal length (dynamic programming over polygon
// triangulations). Triangles keep the loop's orientation.
func (g *mcGeom) triangulateLoop(loop []uint8) ([][3]uint8, bool) {
	n := len(loop)
	pos := make([][3]float64, n)
	for i, e := range loop {
		pos[i] = g.edgeMid(int(e))
	}
	// chord(i, j), i < j: a polygon side or an allowed diagonal.
	chord := func(i, j int) (ok bool, length float64) {
		if j == i+1 || (i == 0 && j == n-1) {
			return true, 0
		}
		if g.shareFace[loop[i]][loop[j]] {
			return false, 0
		}
		d := sub3(pos[j], pos[i])
		return true, math.Sqrt(dot3(d, d))
	}
	inf := math.Inf(1)
	cost := make([][]float64, n)
	best := make([][]int, n)
	for i := range cost {
		cost[i] = make([]float64, n)
		best[i] = make([]int, n)
		for j := range cost[i] {
			cost[i][j] = inf
			best[i][j] = -1
		}
		if i+1 < n {
			cost[i][i+1] = 0
		}
	}
	for span := 2; span < n; span++ {
		for i := 0; i+span < n; i++ {
			j := i + span
			ok, l := chord(i, j)
			if !ok {
				continue
			}
			for k := i + 1; k < j; k++ {
				c := cost[i][k] + cost[k][j] + l
				if c < cost[i][j]-1e-12 {
					cost[i][j], best[i][j] = c, k
				}
			}
		}
	}
	if math.IsInf(cost[0][n-1], 1) {
		return nil, false
	}
	var tris [][3]uint8
	var walk func(i, j int)
	walk = func(i, j int) {
		if j-i < 2 {
			return
		}
		k := best[i][j]
		tris = append(tris, [3]uint8{loop[i], loop[k], loop[j]})
		walk(i, k)
		walk(k, j)
	}
	walk(0, n-1)
	return tris, true
}

func sub3(a, b [3]float64) [3]float64 { return [3]float64{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }
func dot3(a, b [3]float64) float64    { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func cross3(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}

// mcTable is the lookup form of cellTriangles for the hot loop.
type mcTable struct {
	geom *mcGeom
	// amb[cs] is the mask of ambiguous faces of case cs.
	amb [256]uint8
	// crossed[cs] is the mask of crossed edges of case cs.
	crossed [256]uint16
	// off[cs<<6|joined] .. off[cs<<6|joined+1] index tris (3 edge ids a
	// triangle); only joined ⊆ amb[cs] is filled, other entries empty.
	off  [256*64 + 1]uint32
	tris []uint8
	// centres[cs<<6|joined][k] is the edge mask of the loop around
	// centre vertex mcCentre+k (0 when unused).
	centres [256 * 64][mcMaxCentres]uint16
}

var mcTableOnce = sync.OnceValues(buildMCTable)

func buildMCTable() (*mcTable, error) {
	g := newMCGeom()
	t := &mcTable{geom: g}
	for cs := 0; cs < 256; cs++ {
		t.amb[cs] = g.ambiguousFaces(cs)
		t.crossed[cs] = g.crossedEdges(cs)
		for j := 0; j < 64; j++ {
			t.off[cs<<6|j] = uint32(len(t.tris))
			if uint8(j)&^t.amb[cs] != 0 {
				continue
			}
			c, err := g.cellTriangles(cs, uint8(j))
			if err != nil {
				return nil, err
			}
			copy(t.centres[cs<<6|j][:], c.centres)
			for _, tr := range c.tris {
				t.tris = append(t.tris, tr[0], tr[1], tr[2])
			}
		}
	}
	t.off[256*64] = uint32(len(t.tris))
	return t, nil
}
