package mesh

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"
)

// kdBucket is the largest number of points in a leaf; since the depth
// is a whole number of halvings, leaves hold between about kdBucket/2
// and kdBucket points. Leaves are scanned linearly; a handful to a few
// dozen points per leaf is the usual balance between tree depth and scan
// length (common practice). Of 6, 8, 12, 16 and 24, 16 measured as fast
// as any in the Nearest, KNearest and Radius benchmarks of
// kdtree_test.go at 10k and 100k points.
const kdBucket = 16

// kdMaxPoints bounds the number of points in a tree: indices are stored
// as int32 to halve the index array.
const kdMaxPoints = math.MaxInt32

// Neighbor is one result of KDTree.KNearest: the index of a point in the
// slice given to NewKDTree and its squared distance to the query.
type Neighbor struct {
	Index int
	Dist2 float64
}

// KDTree is a static k-d tree (Bentley 1975, "Multidimensional binary
// search trees used for associative searching", CACM 18(9),
// doi:10.1145/361002.361007) over 3-D points, for nearest-neighbour,
// k-nearest and fixed-radius queries.
//
// Layout: the points are copied into one flat coordinate slice permuted
// into tree order, beside a slice of their original indices. The tree is
// implicit and complete: internal node i has children 2i+1 and 2i+2 and
// covers a contiguous range of the permuted points whose bounds are
// recomputed while descending (the split position is always the middle
// of the range), so a node stores only its split value and axis. Every
// leaf holds at most kdBucket points. Each split is at the median along
// the axis of largest extent of its range's points.
//
// Queries descend to the query's leaf first and then visit other cells
// while their lower-bound distance can still beat the current result.
// The bound is the distance to the cell itself, not just to its
// splitting plane: one offset per axis is carried down the recursion
// and only the split axis's offset changes at each step (Arya & Mount
// 1993, "Algorithms for fast vector quantization", DCC,
// doi:10.1109/DCC.1993.253111). The squared distance of a point is
// always computed as sq3 computes it, and the cell bound is computed the
// same way from offsets that are never larger, so pruning is exact in
// floating point: a point at exactly the best distance (or exactly r) is
// never lost to rounding.
//
// A KDTree is read-only after NewKDTree returns, so any number of
// goroutines may query it at once. Queries allocate nothing when the
// destination slice has enough capacity.
//
// Ties are broken by the smaller original index, so every result is
// fully determined by the input points and the query, and equals what a
// brute-force scan with the same rule returns.
type KDTree struct {
	coords []float64 // x, y, z of the points in tree order
	index  []int32   // original index of each point in tree order
	nodes  []kdNode  // internal nodes, implicit complete binary tree
	depth  int       // number of internal levels; leaves are at this depth
}

type kdNode struct {
	split float64
	axis  int
}

// NewKDTree builds a tree over points. It copies what it needs, so the
// caller may change points afterwards. An empty or nil slice gives an
// empty tree. Points with a NaN or infinite coordinate are left out (no
// query can return them); Len counts only the points kept. It panics if
// there are more than math.MaxInt32 points.
func NewKDTree(points []r3.Vec) *KDTree {
	if len(points) > kdMaxPoints {
		panic(fmt.Sprintf("mesh: NewKDTree of %d points, more than %d", len(points), kdMaxPoints))
	}
	n := 0
	for _, p := range points {
		if isFinite(p) {
			n++
		}
	}
	t := &KDTree{
		coords: make([]float64, 0, 3*n),
		index:  make([]int32, 0, n),
	}
	for i, p := range points {
		if isFinite(p) {
			t.coords = append(t.coords, p.X, p.Y, p.Z)
			t.index = append(t.index, int32(i))
		}
	}
	// The smallest depth whose leaves hold at most kdBucket points. With
	// the split at lo+(hi−lo)/2, the ranges at depth d hold ⌊n/2^d⌋ or
	// ⌈n/2^d⌉ points.
	for (n+(1<<t.depth)-1)>>t.depth > kdBucket {
		t.depth++
	}
	t.nodes = make([]kdNode, (1<<t.depth)-1)
	t.build(0, 0, n, 0)
	return t
}

// sq3 returns dx² + dy² + dz², rounding each product (the conversions
// forbid fused multiply-adds), so that a cell's lower bound, computed
// from per-axis offsets no larger than a point's, can never exceed that
// point's computed squared distance: rounding is monotone.
func sq3(dx, dy, dz float64) float64 {
	return float64(dx*dx) + float64(dy*dy) + float64(dz*dz)
}

func isFinite(p r3.Vec) bool {
	return !math.IsNaN(p.X) && !math.IsInf(p.X, 0) &&
		!math.IsNaN(p.Y) && !math.IsInf(p.Y, 0) &&
		!math.IsNaN(p.Z) && !math.IsInf(p.Z, 0)
}

// build splits the points in [lo, hi) at node and recurses.
func (t *KDTree) build(node, lo, hi, level int) {
	if level == t.depth {
		return
	}
	c := t.coords
	minv := [3]float64{math.Inf(1), math.Inf(1), math.Inf(1)}
	maxv := [3]float64{math.Inf(-1), math.Inf(-1), math.Inf(-1)}
	for i := lo; i < hi; i++ {
		for a := 0; a < 3; a++ {
			v := c[3*i+a]
			minv[a] = min(minv[a], v)
			maxv[a] = max(maxv[a], v)
		}
	}
	axis := 0
	for a := 1; a < 3; a++ {
		if maxv[a]-minv[a] > maxv[axis]-minv[axis] {
			axis = a
		}
	}
	mid := lo + (hi-lo)/2
	split := 0.0
	if hi > lo {
		t.selectNth(lo, hi, mid, axis)
		split = c[3*mid+axis]
	}
	t.nodes[node] = kdNode{split: split, axis: axis}
	t.build(2*node+1, lo, mid, level+1)
	t.build(2*node+2, mid, hi, level+1)
}

// selectNth reorders the points in [lo, hi) so that the one at k has the
// value along axis it would have in sorted order, none before it is
// greater and none after it is smaller (Hoare's FIND, CACM 4(7), 1961,
// doi:10.1145/366622.366647, with a median-of-three pivot).
func (t *KDTree) selectNth(lo, hi, k, axis int) {
	c := t.coords
	l, r := lo, hi-1
	for l < r {
		a, b, d := c[3*l+axis], c[3*(l+(r-l)/2)+axis], c[3*r+axis]
		x := max(min(a, b), min(max(a, b), d)) // median of three
		i, j := l, r
		for i <= j {
			for c[3*i+axis] < x {
				i++
			}
			for x < c[3*j+axis] {
				j--
			}
			if i <= j {
				t.swap(i, j)
				i++
				j--
			}
		}
		if j < k {
			l = i
		}
		if k < i {
			r = j
		}
	}
}

func (t *KDTree) swap(i, j int) {
	c := t.coords
	c[3*i], c[3*j] = c[3*j], c[3*i]
	c[3*i+1], c[3*j+1] = c[3*j+1], c[3*i+1]
	c[3*i+2], c[3*j+2] = c[3*j+2], c[3*i+2]
	t.index[i], t.index[j] = t.index[j], t.index[i]
}

// Len returns the number of points in the tree.
func (t *KDTree) Len() int { return len(t.index) }

// nnSearch is the state of one Nearest query.
type nnSearch struct {
	q     [3]float64
	best  int32
	bestD float64
}

// Nearest returns the index (into the slice given to NewKDTree) of the
// point nearest to q and its squared distance; among equally near points
// the smallest index. It returns (−1, +Inf) when the tree is empty or q
// has a NaN or infinite coordinate.
func (t *KDTree) Nearest(q r3.Vec) (index int, dist2 float64) {
	s := nnSearch{q: [3]float64{q.X, q.Y, q.Z}, best: -1, bestD: math.Inf(1)}
	if len(t.index) > 0 && isFinite(q) {
		t.nearest(&s, 0, 0, len(t.index), 0, [3]float64{})
	}
	return int(s.best), s.bestD
}

// NearestWithin is Nearest limited to points within squared distance
// maxD2 of q: it returns what Nearest returns when that point lies
// within maxD2 (inclusive), else (−1, +Inf). The bound prunes the
// search from the start, which ICP, rejecting farther pairs anyway,
// exploits.
func (t *KDTree) NearestWithin(q r3.Vec, maxD2 float64) (index int, dist2 float64) {
	if !(maxD2 >= 0) {
		return -1, math.Inf(1)
	}
	// best starts above every index, so that a point at exactly maxD2
	// is taken by the tie rule.
	s := nnSearch{q: [3]float64{q.X, q.Y, q.Z}, best: math.MaxInt32, bestD: maxD2}
	if len(t.index) > 0 && isFinite(q) {
		t.nearest(&s, 0, 0, len(t.index), 0, [3]float64{})
	}
	if s.best == math.MaxInt32 {
		return -1, math.Inf(1)
	}
	return int(s.best), s.bestD
}

// nearest searches the cell of node, covering [lo, hi) at level; off
// holds, per axis, the distance from q to the cell's slab along that
// axis (zero when q is inside it).
func (t *KDTree) nearest(s *nnSearch, node, lo, hi, level int, off [3]float64) {
	if level == t.depth {
		c := t.coords
		for i := lo; i < hi; i++ {
			dx := c[3*i] - s.q[0]
			dy := c[3*i+1] - s.q[1]
			dz := c[3*i+2] - s.q[2]
			d := sq3(dx, dy, dz)
			if d < s.bestD || (d == s.bestD && t.index[i] < s.best) {
				s.bestD, s.best = d, t.index[i]
			}
		}
		return
	}
	n := t.nodes[node]
	diff := s.q[n.axis] - n.split
	mid := lo + (hi-lo)/2
	nearNode, farNode := 2*node+1, 2*node+2
	nearLo, nearHi, farLo, farHi := lo, mid, mid, hi
	if diff >= 0 {
		nearNode, farNode = farNode, nearNode
		nearLo, nearHi, farLo, farHi = farLo, farHi, nearLo, nearHi
	}
	t.nearest(s, nearNode, nearLo, nearHi, level+1, off)
	off[n.axis] = diff
	rd := sq3(off[0], off[1], off[2])
	// ≤ rather than <: a point at exactly the best distance with a
	// smaller index must still be found.
	if rd <= s.bestD {
		t.nearest(s, farNode, farLo, farHi, level+1, off)
	}
}

// knnSearch is the state of one KNearest query: a max-heap of at most k
// neighbours ordered by (Dist2, Index).
type knnSearch struct {
	q    [3]float64
	k    int
	heap []Neighbor
}

// worse reports whether a orders after b: farther, or as far with a
// larger index.
func worse(a, b Neighbor) bool {
	return a.Dist2 > b.Dist2 || (a.Dist2 == b.Dist2 && a.Index > b.Index)
}

// KNearest appends to dst[:0] the k points nearest to q, sorted by
// Dist2 ascending and, among equal distances, by Index ascending, and
// returns the extended slice. It returns fewer than k when the tree holds
// fewer points, and none for k ≤ 0 or a query with a NaN or infinite
// coordinate.
func (t *KDTree) KNearest(q r3.Vec, k int, dst []Neighbor) []Neighbor {
	dst = dst[:0]
	if k <= 0 || len(t.index) == 0 || !isFinite(q) {
		return dst
	}
	s := knnSearch{q: [3]float64{q.X, q.Y, q.Z}, k: min(k, len(t.index)), heap: dst}
	t.knearest(&s, 0, 0, len(t.index), 0, [3]float64{})
	// Heap sort in place: repeatedly move the worst to the end.
	h := s.heap
	for end := len(h) - 1; end > 0; end-- {
		h[0], h[end] = h[end], h[0]
		siftDown(h[:end], 0)
	}
	return h
}

func (t *KDTree) knearest(s *knnSearch, node, lo, hi, level int, off [3]float64) {
	if level == t.depth {
		c := t.coords
		for i := lo; i < hi; i++ {
			dx := c[3*i] - s.q[0]
			dy := c[3*i+1] - s.q[1]
			dz := c[3*i+2] - s.q[2]
			nb := Neighbor{Index: int(t.index[i]), Dist2: sq3(dx, dy, dz)}
			if len(s.heap) < s.k {
				s.heap = append(s.heap, nb)
				siftUp(s.heap, len(s.heap)-1)
			} else if worse(s.heap[0], nb) {
				s.heap[0] = nb
				siftDown(s.heap, 0)
			}
		}
		return
	}
	n := t.nodes[node]
	diff := s.q[n.axis] - n.split
	mid := lo + (hi-lo)/2
	nearNode, farNode := 2*node+1, 2*node+2
	nearLo, nearHi, farLo, farHi := lo, mid, mid, hi
	if diff >= 0 {
		nearNode, farNode = farNode, nearNode
		nearLo, nearHi, farLo, farHi = farLo, farHi, nearLo, nearHi
	}
	t.knearest(s, nearNode, nearLo, nearHi, level+1, off)
	off[n.axis] = diff
	rd := sq3(off[0], off[1], off[2])
	if len(s.heap) < s.k || rd <= s.heap[0].Dist2 {
		t.knearest(s, farNode, farLo, farHi, level+1, off)
	}
}

func siftUp(h []Neighbor, i int) {
	for i > 0 {
		p := (i - 1) / 2
		if !worse(h[i], h[p]) {
			return
		}
		h[i], h[p] = h[p], h[i]
		i = p
	}
}

func siftDown(h []Neighbor, i int) {
	for {
		l := 2*i + 1
		if l >= len(h) {
			return
		}
		w := l
		if r := l + 1; r < len(h) && worse(h[r], h[l]) {
			w = r
		}
		if !worse(h[w], h[i]) {
			return
		}
		h[i], h[w] = h[w], h[i]
		i = w
	}
}

// radiusSearch is the state of one Radius query.
type radiusSearch struct {
	q   [3]float64
	r2  float64
	out []int
}

// Radius appends to dst[:0] the indices of all points within distance r
// of q (distance ≤ r), in ascending index order, and returns the
// extended slice. It returns none for a negative or NaN r or a query with
// a NaN or infinite coordinate. An infinite r returns every point.
func (t *KDTree) Radius(q r3.Vec, r float64, dst []int) []int {
	dst = dst[:0]
	if !(r >= 0) || len(t.index) == 0 || !isFinite(q) {
		return dst
	}
	s := radiusSearch{q: [3]float64{q.X, q.Y, q.Z}, r2: r * r, out: dst}
	t.radius(&s, 0, 0, len(t.index), 0, [3]float64{})
	slices.Sort(s.out)
	return s.out
}

func (t *KDTree) radius(s *radiusSearch, node, lo, hi, level int, off [3]float64) {
	if level == t.depth {
		c := t.coords
		for i := lo; i < hi; i++ {
			dx := c[3*i] - s.q[0]
			dy := c[3*i+1] - s.q[1]
			dz := c[3*i+2] - s.q[2]
			if sq3(dx, dy, dz) <= s.r2 {
				s.out = append(s.out, int(t.index[i]))
			}
		}
		return
	}
	n := t.nodes[node]
	diff := s.q[n.axis] - n.split
	mid := lo + (hi-lo)/2
	nearNode, farNode := 2*node+1, 2*node+2
	nearLo, nearHi, farLo, farHi := lo, mid, mid, hi
	if diff >= 0 {
		nearNode, farNode = farNode, nearNode
		nearLo, nearHi, farLo, farHi = farLo, farHi, nearLo, nearHi
	}
	t.radius(s, nearNode, nearLo, nearHi, level+1, off)
	off[n.axis] = diff
	rd := sq3(off[0], off[1], off[2])
	if rd <= s.r2 {
		t.radius(s, farNode, farLo, farHi, level+1, off)
	}
}
