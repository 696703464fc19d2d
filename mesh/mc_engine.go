package mesh

// The marching-cubes engine. The lattice is cut into BlockSize³ tiles
// (the blocks of a BlockVolume, or tiles of a Grid); tile K holds the
// cells whose minimum corner lies in it, and owns the lattice edges
// whose lower endpoint lies in it.
//
// Phase 1, in parallel over tiles: copy the tile's values with a margin
// (local coordinates −1…9, enough for the cells 0…7, for the cells −1…7
// that touch an owned edge, and for central differences at the points
// 0…8) into a scratch buffer; give a vertex to every owned crossed edge
// that borders at least one extracted cell (all eight corners known),
// numbered in the tile's edge order; then emit the tile's triangles.
// A triangle corner on an owned edge refers to the local vertex number;
// one on an edge owned by a +x/+y/+z neighbour refers to (neighbour,
// edge), resolved in phase 2. The neighbour has made that vertex: the
// referring cell lies in its margin, and it applies the same rule to
// the same lattice values.
//
// Phase 2: vertices are numbered tile by tile in key order (z, then y,
// then x), so the output depends neither on the worker count nor on
// the scheduling; then, in parallel, vertices are copied out and
// references resolved.

import (
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/spatial/r3"
)

const (
	padN       = BlockSize + 3 // scratch side: local −1…9
	padN2      = padN * padN
	padN3      = padN2 * padN
	flagN      = BlockSize + 2 // flag side: points −1…8
	flagN2     = flagN * flagN
	ownedEdges = BlockValues * 3

	refForeign = 1 << 31
	refSlotSh  = 16
)

// mcSource is a lattice cut into tiles, listed in key order.
type mcSource interface {
	numTiles() int
	tileKey(t int) [3]int
	// up returns the tile at tileKey(t) + (dx, dy, dz), d ∈ {0, 1}, or
	// −1 when there is none.
	up(t, dx, dy, dz int) int
	// gather fills vals (padN³, local −1…9, x fastest) with the values
	// around tile t, NaN where unknown, and cols likewise when the
	// source has colours.
	gather(t int, vals []float32, cols []RGB)
	hasColors() bool
}

// mcTileOut records where a tile's phase-1 output lives.
type mcTileOut struct {
	ch     *mcChunk
	v0, nv int32 // vertices in the chunk; the first ne are edge vertices
	ne     int32
	r0, nr int32 // triangle-corner references in the chunk
}

// Chunk capacities. A tile makes at most ownedEdges edge vertices plus
// one centre vertex per cell, and at most 12 triangles per cell; a tile
// starts a new chunk when the current one might not hold its output, so
// chunks never grow (and never copy).
const (
	maxTileVerts = ownedEdges + BlockValues
	maxTileRefs  = BlockValues * 12 * 3
	chunkVerts   = 16 * maxTileVerts
	chunkRefs    = 8 * maxTileRefs
)

// mcChunk is a slab of phase-1 output.
type mcChunk struct {
	pos   []r3.Vec
	nrm   []r3.Vec
	col   []RGB
	edges []uint16 // owned edge index per vertex; 0xffff for centre vertices
	refs  []uint32
}

func newMCChunk() *mcChunk {
	return &mcChunk{
		pos:   make([]r3.Vec, 0, chunkVerts),
		nrm:   make([]r3.Vec, 0, chunkVerts),
		col:   make([]RGB, 0, chunkVerts),
		edges: make([]uint16, 0, chunkVerts),
		refs:  make([]uint32, 0, chunkRefs),
	}
}

// chunk returns a chunk with room for one more tile's output.
func (wk *mcWorker) chunk() *mcChunk {
	if wk.used > 0 {
		c := wk.chunks[wk.used-1]
		if len(c.pos)+maxTileVerts <= cap(c.pos) && len(c.refs)+maxTileRefs <= cap(c.refs) {
			return c
		}
	}
	if wk.used == len(wk.chunks) {
		wk.chunks = append(wk.chunks, newMCChunk())
	}
	wk.used++
	return wk.chunks[wk.used-1]
}

// mcWorker is one goroutine's scratch space and output arena.
type mcWorker struct {
	vals    [padN3]float32
	cols    [padN3]RGB
	rowIn   [flagN * flagN]uint16   // per x row of points −1…8: inside bits
	rowUnk  [flagN * flagN]uint16   // and unknown bits
	needed  [ownedEdges / 64]uint64 // bit set of owned edges that get a vertex
	localID [ownedEdges]int32
	cells   []uint32 // own mixed cells: flag index << 8 | case

	chunks []*mcChunk // output slabs; the first used are in use
	used   int
}

// mcWorkers keeps workers, with their scratch buffers and the capacity
// of their arenas, between extractions.
var mcWorkers = sync.Pool{New: func() any { return new(mcWorker) }}

// reset empties the output chunks, keeping them for the next run.
func (wk *mcWorker) reset() {
	for _, c := range wk.chunks[:wk.used] {
		c.pos, c.nrm, c.col = c.pos[:0], c.nrm[:0], c.col[:0]
		c.edges, c.refs = c.edges[:0], c.refs[:0]
	}
	wk.used = 0
	wk.cells = wk.cells[:0]
}

var (
	// Corner offsets in the scratch layout.
	padCorner [8]int
	padStride = [3]int{1, padN, padN2}
	// ownedDelta[e] is ownedIndex of cell edge e relative to the
	// cell's minimum corner.
	ownedDelta [12]int
)

func init() {
	for c := 0; c < 8; c++ {
		x, y, z := c&1, c>>1&1, c>>2&1
		padCorner[c] = x + padN*y + padN2*z
	}
	for e := 0; e < 12; e++ {
		// Edge e's lower corner and axis, as in newMCGeom.
		a := e / 4
		r := e % 4
		u, v := otherAxes(a)
		var d [3]int
		d[u], d[v] = r&1, r>>1
		ownedDelta[e] = ownedIndex(d[0], d[1], d[2], a)
	}
}

func runMC(src mcSource, origin r3.Vec, h float64, iso float32, workers int) (*Mesh, error) {
	tab, err := mcTableOnce()
	if err != nil {
		return nil, err
	}
	n := src.numTiles()
	outs := make([]mcTileOut, n)
	if workers > n {
		workers = n
	}
	if workers < 1 {
		workers = 1
	}
	ws := make([]*mcWorker, workers)
	defer func() {
		for _, wk := range ws {
			wk.reset()
			mcWorkers.Put(wk)
		}
	}()
	var next atomic.Int64
	var wg sync.WaitGroup
	const chunk = 4
	for w := range ws {
		ws[w] = mcWorkers.Get().(*mcWorker)
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			wk := ws[w]
			for {
				t0 := int(next.Add(chunk) - chunk)
				if t0 >= n {
					return
				}
				for t := t0; t < t0+chunk && t < n; t++ {
					outs[t] = wk.tile(tab, src, t, origin, h, iso)
				}
			}
		}(w)
	}
	wg.Wait()

	// Phase 2: number vertices and faces in tile order.
	vbase := make([]int64, n+1)
	rbase := make([]int64, n+1)
	for t := 0; t < n; t++ {
		vbase[t+1] = vbase[t] + int64(outs[t].nv)
		rbase[t+1] = rbase[t] + int64(outs[t].nr)
	}
	nv, nr := vbase[n], rbase[n]
	if nv > math.MaxUint32 {
		return nil, fmt.Errorf("mesh: isosurface has %d vertices, more than a Face can index", nv)
	}
	m := &Mesh{
		Vertices: make([]r3.Vec, nv),
		Normals:  make([]r3.Vec, nv),
		Faces:    make([]Face, nr/3),
	}
	if src.hasColors() {
		m.Colors = make([]RGB, nv)
	}
	var bad atomic.Value
	next.Store(0)
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			const chunk = 16
			for {
				t0 := int(next.Add(chunk) - chunk)
				if t0 >= n {
					return
				}
				for t := t0; t < t0+chunk && t < n; t++ {
					if err := resolveTile(m, src, outs, vbase, rbase, t); err != nil {
						bad.Store(err)
						return
					}
				}
			}
		}()
	}
	wg.Wait()
	if e := bad.Load(); e != nil {
		return nil, e.(error)
	}
	return m, nil
}

// resolveTile copies tile t's vertices into m and turns its references
// into vertex numbers.
func resolveTile(m *Mesh, src mcSource, outs []mcTileOut, vbase, rbase []int64, t int) error {
	o := outs[t]
	if o.nv == 0 && o.nr == 0 {
		return nil
	}
	ch := o.ch
	vb := vbase[t]
	copy(m.Vertices[vb:], ch.pos[o.v0:o.v0+o.nv])
	copy(m.Normals[vb:], ch.nrm[o.v0:o.v0+o.nv])
	if m.Colors != nil {
		copy(m.Colors[vb:], ch.col[o.v0:o.v0+o.nv])
	}
	refs := ch.refs[o.r0 : o.r0+o.nr]
	faces := m.Faces[rbase[t]/3 : (rbase[t]+int64(o.nr))/3]
	for i, r := range refs {
		var id int64
		if r&refForeign == 0 {
			id = vb + int64(r)
		} else {
			slot := int(r>>refSlotSh) & 7
			e := uint16(r)
			nb := src.up(t, slot&1, slot>>1&1, slot>>2&1)
			if nb < 0 {
				return fmt.Errorf("mesh: marching cubes: tile %v refers to a missing neighbour (bug)", src.tileKey(t))
			}
			no := outs[nb]
			if no.ch == nil {
				return fmt.Errorf("mesh: marching cubes: tile %v refers to an empty neighbour (bug)", src.tileKey(t))
			}
			list := no.ch.edges[no.v0 : no.v0+no.ne]
			k, ok := slices.BinarySearch(list, e)
			if !ok {
				return fmt.Errorf("mesh: marching cubes: tile %v refers to an edge its neighbour did not make (bug)", src.tileKey(t))
			}
			id = vbase[nb] + int64(k)
		}
		faces[i/3][i%3] = uint32(id)
	}
	return nil
}

// tile runs phase 1 on tile t.
func (wk *mcWorker) tile(tab *mcTable, src mcSource, t int, origin r3.Vec, h float64, iso float32) mcTileOut {
	var out mcTileOut
	hasCol := src.hasColors()
	var cols []RGB
	if hasCol {
		cols = wk.cols[:]
	}
	src.gather(t, wk.vals[:], cols)

	// Bit masks of the inside and unknown points −1…8 of each x row
	// (bit x+1 for local x); skip tiles with no crossing there.
	var anyIn, anyOut bool
	for r := 0; r < flagN*flagN; r++ {
		y, z := r%flagN, r/flagN
		pi := padN*y + padN2*z
		var in, unk uint16
		for x := 0; x < flagN; x++ {
			v := wk.vals[pi+x]
			if v-v != 0 { // NaN or ±Inf
				unk |= 1 << x
			} else if v < iso {
				in |= 1 << x
			}
		}
		wk.rowIn[r], wk.rowUnk[r] = in, unk
		anyIn = anyIn || in != 0
		anyOut = anyOut || in|unk != 1<<flagN-1
	}
	if !anyIn || !anyOut {
		return out
	}

	// Cells with minimum corner −1…7: mark the owned edges they cross,
	// and list the tile's own cells (0…7). The case of the cell at x in
	// the cell row (y, z) takes its corner bits c = x + 2y + 4z from the
	// four point rows around it.
	wk.cells = wk.cells[:0]
	const full = 1<<flagN - 1
	for cz := -1; cz < BlockSize; cz++ {
		for cy := -1; cy < BlockSize; cy++ {
			r := (cy + 1) + flagN*(cz+1)
			r00, r10, r01, r11 := wk.rowIn[r], wk.rowIn[r+1], wk.rowIn[r+flagN], wk.rowIn[r+flagN+1]
			u := wk.rowUnk[r] | wk.rowUnk[r+1] | wk.rowUnk[r+flagN] | wk.rowUnk[r+flagN+1]
			if r00|r10|r01|r11 == 0 || (r00&r10&r01&r11 == full) || u == full {
				continue
			}
			for cx := -1; cx < BlockSize; cx++ {
				sh := uint(cx + 1)
				if u>>sh&3 != 0 {
					continue
				}
				cs := uint8(r00>>sh&3 | (r10>>sh&3)<<2 | (r01>>sh&3)<<4 | (r11>>sh&3)<<6)
				if cs == 0 || cs == 255 {
					continue
				}
				mask := tab.crossed[cs]
				if cx >= 0 && cy >= 0 && cz >= 0 && cx < BlockSize-1 && cy < BlockSize-1 && cz < BlockSize-1 {
					base := ownedIndex(cx, cy, cz, 0)
					for e := 0; e < 12; e++ {
						if mask>>e&1 != 0 {
							i := base + ownedDelta[e]
							wk.needed[i>>6] |= 1 << (i & 63)
						}
					}
				} else {
					for e := 0; e < 12; e++ {
						if mask>>e&1 == 0 {
							continue
						}
						ed := tab.geom.edges[e]
						x, y, z := cx+int(ed.c0&1), cy+int(ed.c0>>1&1), cz+int(ed.c0>>2&1)
						if x < 0 || y < 0 || z < 0 || x >= BlockSize || y >= BlockSize || z >= BlockSize {
							continue
						}
						i := ownedIndex(x, y, z, int(ed.axis))
						wk.needed[i>>6] |= 1 << (i & 63)
					}
				}
				if cx >= 0 && cy >= 0 && cz >= 0 {
					fi := (cx + 1) + flagN*(cy+1) + flagN2*(cz+1)
					wk.cells = append(wk.cells, uint32(fi)<<8|uint32(cs))
				}
			}
		}
	}

	// Owned vertices, in edge order.
	ch := wk.chunk()
	out = mcTileOut{ch: ch, v0: int32(len(ch.pos)), r0: int32(len(ch.refs))}
	key := src.tileKey(t)
	gx0, gy0, gz0 := key[0]*BlockSize, key[1]*BlockSize, key[2]*BlockSize
	ctx := vertexCtx{wk: wk, origin: origin, h: h, iso: float64(iso), hasCol: hasCol, gx0: gx0, gy0: gy0, gz0: gz0}
	var nloc int32
	for w, word := range wk.needed {
		wk.needed[w] = 0
		for ; word != 0; word &= word - 1 {
			i := w<<6 | bits.TrailingZeros64(word)
			a := i % 3
			p := i / 3
			x, y, z := p%BlockSize, p/BlockSize%BlockSize, p/(BlockSize*BlockSize)
			pos, nrm, col := ctx.edgeVertex(x, y, z, a)
			ch.pos = append(ch.pos, pos)
			ch.nrm = append(ch.nrm, nrm)
			if hasCol {
				ch.col = append(ch.col, col)
			}
			ch.edges = append(ch.edges, uint16(i))
			wk.localID[i] = nloc
			nloc++
		}
	}
	out.ne = nloc

	// Triangles of the own cells.
	var refs [12 + mcMaxCentres]uint32
	for _, cc := range wk.cells {
		fi := int(cc >> 8)
		cs := uint8(cc)
		cx := fi%flagN - 1
		cy := fi/flagN%flagN - 1
		cz := fi/flagN2 - 1
		mask := tab.crossed[cs]
		for e := 0; e < 12; e++ {
			if mask>>e&1 == 0 {
				continue
			}
			ed := tab.geom.edges[e]
			x, y, z := cx+int(ed.c0&1), cy+int(ed.c0>>1&1), cz+int(ed.c0>>2&1)
			var slot int
			if x == BlockSize {
				x, slot = 0, slot|1
			}
			if y == BlockSize {
				y, slot = 0, slot|2
			}
			if z == BlockSize {
				z, slot = 0, slot|4
			}
			oi := ownedIndex(x, y, z, int(ed.axis))
			if slot == 0 {
				refs[e] = uint32(wk.localID[oi])
			} else {
				refs[e] = refForeign | uint32(slot)<<refSlotSh | uint32(oi)
			}
		}
		var joined uint8
		if amb := tab.amb[cs]; amb != 0 {
			joined = ctx.decide(cx, cy, cz, amb, tab)
		}
		ti := int(cs)<<6 | int(joined)
		for k, m := range tab.centres[ti] {
			if m == 0 {
				continue
			}
			pos, nrm, col := ctx.centreVertex(cx, cy, cz, m, tab)
			ch.pos = append(ch.pos, pos)
			ch.nrm = append(ch.nrm, nrm)
			if hasCol {
				ch.col = append(ch.col, col)
			}
			ch.edges = append(ch.edges, 0xffff)
			refs[mcCentre+k] = uint32(nloc)
			nloc++
		}
		for _, e := range tab.tris[tab.off[ti]:tab.off[ti+1]] {
			ch.refs = append(ch.refs, refs[e])
		}
	}
	out.nv = nloc
	out.nr = int32(len(ch.refs)) - out.r0
	return out
}

// ownedIndex numbers the edges owned by a tile: lattice point (x, y, z)
// in 0…BlockSize−1, axis a.
func ownedIndex(x, y, z, a int) int {
	return ((z*BlockSize+y)*BlockSize+x)*3 + a
}

// vertexCtx computes vertex attributes from a worker's scratch buffer.
type vertexCtx struct {
	wk            *mcWorker
	origin        r3.Vec
	h, iso        float64
	hasCol        bool
	gx0, gy0, gz0 int
}

// gradient returns the field's gradient at scratch index pi (times the
// spacing): central differences, one-sided where a neighbour is unknown,
// 0 along an axis with both neighbours unknown.
func (c *vertexCtx) gradient(pi int) [3]float64 {
	var g [3]float64
	v := float64(c.wk.vals[pi])
	for a := 0; a < 3; a++ {
		s := padStride[a]
		vm, vp := c.wk.vals[pi-s], c.wk.vals[pi+s]
		km, kp := vm-vm == 0, vp-vp == 0
		switch {
		case km && kp:
			g[a] = (float64(vp) - float64(vm)) / 2
		case kp:
			g[a] = float64(vp) - v
		case km:
			g[a] = v - float64(vm)
		}
	}
	return g
}

// edgeVertex returns the vertex on the edge from local point (x, y, z)
// (each in 0…BlockSize) along axis a.
func (c *vertexCtx) edgeVertex(x, y, z, a int) (r3.Vec, r3.Vec, RGB) {
	p0 := (x + 1) + padN*(y+1) + padN2*(z+1)
	p1 := p0 + padStride[a]
	v0, v1 := float64(c.wk.vals[p0]), float64(c.wk.vals[p1])
	t := (c.iso - v0) / (v1 - v0)
	g := [3]float64{float64(c.gx0 + x), float64(c.gy0 + y), float64(c.gz0 + z)}
	g[a] += t
	pos := r3.Vec{
		X: c.origin.X + c.h*g[0],
		Y: c.origin.Y + c.h*g[1],
		Z: c.origin.Z + c.h*g[2],
	}
	g0, g1 := c.gradient(p0), c.gradient(p1)
	n := r3.Vec{
		X: g0[0] + t*(g1[0]-g0[0]),
		Y: g0[1] + t*(g1[1]-g0[1]),
		Z: g0[2] + t*(g1[2]-g0[2]),
	}
	nn := math.Sqrt(n.X*n.X + n.Y*n.Y + n.Z*n.Z)
	if nn > 0 && !math.IsInf(nn, 0) {
		n = r3.Scale(1/nn, n)
	} else {
		// The edge direction from the inside endpoint to the outside one.
		n = r3.Vec{}
		d := 1.0
		if v0 >= c.iso {
			d = -1
		}
		switch a {
		case 0:
			n.X = d
		case 1:
			n.Y = d
		default:
			n.Z = d
		}
	}
	var col RGB
	if c.hasCol {
		c0, c1 := c.wk.cols[p0], c.wk.cols[p1]
		col = RGB{lerp8(c0.R, c1.R, t), lerp8(c0.G, c1.G, t), lerp8(c0.B, c1.B, t)}
	}
	return pos, n, col
}

func lerp8(a, b uint8, t float64) uint8 {
	v := math.Round(float64(a) + t*(float64(b)-float64(a)))
	if v < 0 {
		return 0
	}
	if v > 255 {
		return 255
	}
	return uint8(v)
}

// centreVertex returns the extra vertex of the loop through the edges
// in mask of the cell with minimum corner (cx, cy, cz): the mean of the
// loop's edge vertices, with their mean normal (normalised) and mean
// colour.
func (c *vertexCtx) centreVertex(cx, cy, cz int, mask uint16, tab *mcTable) (r3.Vec, r3.Vec, RGB) {
	var sp, sn r3.Vec
	var sr, sg, sb, k float64
	var first r3.Vec
	for e := 0; e < 12; e++ {
		if mask>>e&1 == 0 {
			continue
		}
		ed := tab.geom.edges[e]
		p, n, col := c.edgeVertex(cx+int(ed.c0&1), cy+int(ed.c0>>1&1), cz+int(ed.c0>>2&1), int(ed.axis))
		if k == 0 {
			first = n
		}
		sp = r3.Add(sp, p)
		sn = r3.Add(sn, n)
		sr += float64(col.R)
		sg += float64(col.G)
		sb += float64(col.B)
		k++
	}
	pos := r3.Scale(1/k, sp)
	n := Normalize(sn)
	if n == (r3.Vec{}) {
		n = first
	}
	return pos, n, RGB{uint8(math.Round(sr / k)), uint8(math.Round(sg / k)), uint8(math.Round(sb / k))}
}

// decide runs the asymptotic decider (Nielson & Hamann 1991) on the
// ambiguous faces amb of the cell with minimum corner (cx, cy, cz) and
// returns the bit mask of faces whose inside corners are joined. The
// face's values are read in the order fixed by mcFace (q00, q10, q11,
// q01 over the face's own axes), which depends only on the face's place
// in the lattice, so both cells sharing a face compute the same bit.
func (c *vertexCtx) decide(cx, cy, cz int, amb uint8, tab *mcTable) uint8 {
	base := (cx + 1) + padN*(cy+1) + padN2*(cz+1)
	var joined uint8
	for f := 0; f < 6; f++ {
		if amb>>f&1 == 0 {
			continue
		}
		q := tab.geom.faces[f].q
		w00 := float64(c.wk.vals[base+padCorner[q[0]]]) - c.iso
		w10 := float64(c.wk.vals[base+padCorner[q[1]]]) - c.iso
		w11 := float64(c.wk.vals[base+padCorner[q[2]]]) - c.iso
		w01 := float64(c.wk.vals[base+padCorner[q[3]]]) - c.iso
		d := w00*w11 - w10*w01
		// The saddle value of the bilinear interpolant is
		// (w00·w11 − w10·w01)/(w00 + w11 − w10 − w01); the
		// denominator's sign is fixed by which diagonal is inside, so
		// the saddle is inside (< 0) exactly when the product of the
		// inside diagonal exceeds that of the outside one.
		if w00 < 0 {
			if d > 0 {
				joined |= 1 << f
			}
		} else if d < 0 {
			joined |= 1 << f
		}
	}
	return joined
}

// gridSource serves a dense Grid as tiles.
type gridSource struct {
	g          *Grid
	tx, ty, tz int
}

func (s *gridSource) numTiles() int { return s.tx * s.ty * s.tz }

func (s *gridSource) tileKey(t int) [3]int {
	return [3]int{t % s.tx, t / s.tx % s.ty, t / (s.tx * s.ty)}
}

func (s *gridSource) up(t, dx, dy, dz int) int {
	k := s.tileKey(t)
	x, y, z := k[0]+dx, k[1]+dy, k[2]+dz
	if x >= s.tx || y >= s.ty || z >= s.tz {
		return -1
	}
	return x + s.tx*(y+s.ty*z)
}

func (s *gridSource) hasColors() bool { return s.g.Colors != nil }

func (s *gridSource) gather(t int, vals []float32, cols []RGB) {
	g := s.g
	k := s.tileKey(t)
	i0 := k[0]*BlockSize - 1
	lo := max(0, -i0)
	hi := min(padN, g.Nx-i0)
	nan := float32(math.NaN())
	for lz := 0; lz < padN; lz++ {
		kk := k[2]*BlockSize - 1 + lz
		for ly := 0; ly < padN; ly++ {
			j := k[1]*BlockSize - 1 + ly
			row := vals[padN*ly+padN2*lz : padN*ly+padN2*lz+padN]
			if kk < 0 || kk >= g.Nz || j < 0 || j >= g.Ny || lo >= hi {
				for x := range row {
					row[x] = nan
				}
				continue
			}
			for x := 0; x < lo; x++ {
				row[x] = nan
			}
			src := i0 + g.Nx*(j+g.Ny*kk)
			copy(row[lo:hi], g.Values[src+lo:src+hi])
			for x := hi; x < padN; x++ {
				row[x] = nan
			}
			if cols != nil {
				copy(cols[padN*ly+padN2*lz+lo:], g.Colors[src+lo:src+hi])
			}
		}
	}
}

// blockSource serves a BlockVolume's blocks as tiles, in key order.
type blockSource struct {
	blocks []Block          // sorted by key
	index  map[uint64]int32 // packKey(key) → position in blocks
	ups    [][8]int32       // per tile, the tile at key + (dx, dy, dz), slot dx|dy<<1|dz<<2
	color  bool
}

func blockLess(a, b BlockKey) int {
	switch {
	case a.Z != b.Z:
		return cmpInt32(a.Z, b.Z)
	case a.Y != b.Y:
		return cmpInt32(a.Y, b.Y)
	}
	return cmpInt32(a.X, b.X)
}

func cmpInt32(a, b int32) int {
	if a < b {
		return -1
	}
	if a > b {
		return 1
	}
	return 0
}

func newBlockSource(blocks []Block) (*blockSource, error) {
	s := &blockSource{blocks: slices.Clone(blocks), index: make(map[uint64]int32, len(blocks))}
	slices.SortFunc(s.blocks, func(a, b Block) int { return blockLess(a.Key, b.Key) })
	for i, b := range s.blocks {
		k := b.Key
		for _, c := range [3]int32{k.X, k.Y, k.Z} {
			if c > MaxBlockCoord || c < -MaxBlockCoord {
				return nil, fmt.Errorf("mesh: block %v: coordinate beyond ±%d", k, MaxBlockCoord)
			}
		}
		if len(b.Values) != BlockValues {
			return nil, fmt.Errorf("mesh: block %v has %d values, want %d", k, len(b.Values), BlockValues)
		}
		if b.Colors != nil && len(b.Colors) != BlockValues {
			return nil, fmt.Errorf("mesh: block %v has %d colours, want %d", k, len(b.Colors), BlockValues)
		}
		if i == 0 {
			s.color = b.Colors != nil
		} else if s.color != (b.Colors != nil) {
			return nil, fmt.Errorf("mesh: block %v: either every block has colours or none has", k)
		}
		if i > 0 && s.blocks[i-1].Key == k {
			return nil, fmt.Errorf("mesh: block %v listed twice", k)
		}
		s.index[packKey(k.X, k.Y, k.Z)] = int32(i)
	}
	s.ups = make([][8]int32, len(s.blocks))
	for i, b := range s.blocks {
		for slot := 0; slot < 8; slot++ {
			s.ups[i][slot] = s.find(b.Key, slot&1, slot>>1&1, slot>>2&1)
		}
	}
	return s, nil
}

// packKey packs block coordinates (within ±(MaxBlockCoord+1), so in
// [1, 2²¹) after the offset) into one map key of 63 bits.
func packKey(x, y, z int32) uint64 {
	const off = 1 << 20
	return uint64(x+off) | uint64(y+off)<<21 | uint64(z+off)<<42
}

func (s *blockSource) find(k BlockKey, dx, dy, dz int) int32 {
	j, ok := s.index[packKey(k.X+int32(dx), k.Y+int32(dy), k.Z+int32(dz))]
	if !ok {
		return -1
	}
	return j
}

func (s *blockSource) numTiles() int { return len(s.blocks) }

func (s *blockSource) tileKey(t int) [3]int {
	k := s.blocks[t].Key
	return [3]int{int(k.X), int(k.Y), int(k.Z)}
}

func (s *blockSource) up(t, dx, dy, dz int) int {
	return int(s.ups[t][dx|dy<<1|dz<<2])
}

func (s *blockSource) hasColors() bool { return s.color }

// padRange gives, for a neighbour offset d ∈ {−1, 0, 1} along an axis,
// the scratch positions it fills and the first position inside the
// neighbour block.
func padRange(d int) (lo, hi, src int) {
	switch d {
	case -1:
		return 0, 1, BlockSize - 1
	case 0:
		return 1, BlockSize + 1, 0
	}
	return BlockSize + 1, padN, 0
}

func (s *blockSource) gather(t int, vals []float32, cols []RGB) {
	k := s.blocks[t].Key
	nan := float32(math.NaN())
	block := func(dx, dy, dz int) *Block {
		if dx|dy|dz == 0 {
			return &s.blocks[t]
		}
		if j := s.find(k, dx, dy, dz); j >= 0 {
			return &s.blocks[j]
		}
		return nil
	}
	for dz := -1; dz <= 1; dz++ {
		z0, z1, sz := padRange(dz)
		for dy := -1; dy <= 1; dy++ {
			y0, y1, sy := padRange(dy)
			bm, b0, bp := block(-1, dy, dz), block(0, dy, dz), block(1, dy, dz)
			for z := z0; z < z1; z++ {
				for y := y0; y < y1; y++ {
					row := vals[padN*y+padN2*z : padN*y+padN2*z+padN]
					src := BlockSize * ((sy + y - y0) + BlockSize*(sz+z-z0))
					// x = −1 from the block below, 0…7 from this one,
					// 8, 9 from the block above.
					if bm != nil {
						row[0] = bm.Values[src+BlockSize-1]
					} else {
						row[0] = nan
					}
					if b0 != nil {
						copy(row[1:BlockSize+1], b0.Values[src:src+BlockSize])
					} else {
						for x := 1; x <= BlockSize; x++ {
							row[x] = nan
						}
					}
					if bp != nil {
						row[BlockSize+1], row[BlockSize+2] = bp.Values[src], bp.Values[src+1]
					} else {
						row[BlockSize+1], row[BlockSize+2] = nan, nan
					}
					if cols == nil {
						continue
					}
					crow := cols[padN*y+padN2*z : padN*y+padN2*z+padN]
					if bm != nil {
						crow[0] = bm.Colors[src+BlockSize-1]
					}
					if b0 != nil {
						copy(crow[1:BlockSize+1], b0.Colors[src:src+BlockSize])
					}
					if bp != nil {
						crow[BlockSize+1], crow[BlockSize+2] = bp.Colors[src], bp.Colors[src+1]
					}
				}
			}
		}
	}
}
