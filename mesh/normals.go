package mesh

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
)

// Orientation says how EstimateNormals turns each normal's sign.
type Orientation int

const (
	// OrientPropagate orients normals consistently over the surface as
	// Hoppe et al. (1992) do: over a minimum spanning tree of the k-NN
	// graph with edge cost 1 − |nᵢ·nⱼ| (so that orientation travels
	// along smooth stretches first), seeded by the point of largest z,
	// whose normal is turned to point along +z. On a closed surface that
	// makes every normal point outward. Every connected component of the
	// graph gets its own seed, its own highest point.
	OrientPropagate Orientation = iota
	// OrientViewpoint turns every normal toward NormalOptions.Viewpoint
	// (nᵢ·(viewpoint − pᵢ) ≥ 0), the right choice for a single view.
	OrientViewpoint
	// OrientNone leaves the signs as the eigen-decomposition gives them.
	OrientNone
)

// NormalOptions tunes EstimateNormals.
type NormalOptions struct {
	// K is the number of nearest neighbours (besides the point itself)
	// whose covariance gives the normal and that link the point in the
	// orientation graph. Hoppe et al. (1992) use a k-neighbourhood; 10
	// to 20 is common practice for evenly sampled clouds.
	// DEFAULT: 12
	K int
	// Orient selects the sign rule.
	// DEFAULT: OrientPropagate
	Orient Orientation
	// Viewpoint is the point the normals face with OrientViewpoint.
	// DEFAULT: the origin
	Viewpoint r3.Vec
	// Workers bounds the goroutines of the neighbour search; 0 means
	// GOMAXPROCS. The result does not depend on it.
	// DEFAULT: 0
	Workers int
}

// DefaultNormalOptions returns the documented defaults.
func DefaultNormalOptions() NormalOptions {
	return NormalOptions{K: 12, Orient: OrientPropagate}
}

// EstimateNormals returns a unit normal for every point of a bare cloud:
// the eigenvector of the smallest eigenvalue of the covariance of the
// point's K nearest neighbours and itself (Hoppe, DeRose, Duchamp,
// McDonald & Stuetzle 1992, "Surface reconstruction from unorganized
// points", SIGGRAPH, DOI 10.1145/133994.134011), with signs chosen by
// opt.Orient. Points with a non-finite coordinate get the zero normal
// and no edges. It returns an error wrapping ErrDegenerate for fewer than
// three finite points, and an error for K < 2.
func EstimateNormals(points []r3.Vec, opt NormalOptions) ([]r3.Vec, error) {
	if opt.K < 2 {
		return nil, fmt.Errorf("mesh: normal estimation needs K ≥ 2 neighbours, have %d", opt.K)
	}
	tree := NewKDTree(points)
	if tree.Len() < 3 {
		return nil, fmt.Errorf("mesh: normal estimation needs 3 finite points, have %d: %w", tree.Len(), ErrDegenerate)
	}
	k := min(opt.K, tree.Len()-1)
	n := len(points)
	normals := make([]r3.Vec, n)
	var nbrs []int32 // k per point, −1 for none
	if opt.Orient == OrientPropagate {
		nbrs = make([]int32, n*k)
	}
	const chunk = 256
	par.For((n+chunk-1)/chunk, opt.Workers, func(c int) {
		dst := make([]Neighbor, 0, k+1)
		for i := c * chunk; i < min(n, (c+1)*chunk); i++ {
			if !isFinite(points[i]) {
				for j := 0; nbrs != nil && j < k; j++ {
					nbrs[i*k+j] = -1
				}
				continue
			}
			dst = tree.KNearest(points[i], k+1, dst[:0])
			var acc covAccumulator
			for _, nb := range dst {
				acc.add(points[nb.Index])
			}
			normals[i] = acc.normal()
			if nbrs != nil {
				j := 0
				for _, nb := range dst {
					if nb.Index != i && j < k {
						nbrs[i*k+j] = int32(nb.Index)
						j++
					}
				}
				for ; j < k; j++ {
					nbrs[i*k+j] = -1
				}
			}
		}
	})
	switch opt.Orient {
	case OrientViewpoint:
		for i, nv := range normals {
			if r3.Dot(nv, r3.Sub(opt.Viewpoint, points[i])) < 0 {
				normals[i] = r3.Scale(-1, nv)
			}
		}
	case OrientPropagate:
		propagateOrientation(points, normals, nbrs, k)
	case OrientNone:
	default:
		return nil, fmt.Errorf("mesh: unknown normal orientation %d", opt.Orient)
	}
	return normals, nil
}

// propagateOrientation flips normals in place so that neighbours agree,
// by Prim's minimum spanning tree over the symmetrised k-NN graph with
// cost 1 − |nᵢ·nⱼ| (Hoppe et al. 1992, section 3.3): each point joins
// the tree through its cheapest edge and takes the sign that agrees with
// the point it joins through. Each component starts at its highest
// point (largest z, ties by index), oriented to +z.
func propagateOrientation(points, normals []r3.Vec, nbrs []int32, k int) {
	n := len(points)
	// Symmetrise: adjacency lists in CSR form.
	deg := make([]int32, n+1)
	for i := 0; i < n; i++ {
		for _, j := range nbrs[i*k : (i+1)*k] {
			if j >= 0 {
				deg[i+1]++
				deg[j+1]++
			}
		}
	}
	for i := 0; i < n; i++ {
		deg[i+1] += deg[i]
	}
	adj := make([]int32, deg[n])
	fill := slices.Clone(deg[:n])
	for i := 0; i < n; i++ {
		for _, j := range nbrs[i*k : (i+1)*k] {
			if j >= 0 {
				adj[fill[i]] = j
				fill[i]++
				adj[fill[j]] = int32(i)
				fill[j]++
			}
		}
	}
	order := make([]int32, 0, n)
	for i := 0; i < n; i++ {
		if isFinite(points[i]) {
			order = append(order, int32(i))
		}
	}
	slices.SortFunc(order, func(a, b int32) int {
		if za, zb := points[a].Z, points[b].Z; za != zb {
			if za > zb {
				return -1
			}
			return 1
		}
		return int(a - b)
	})
	done := make([]bool, n)
	var h edgeHeap
	for _, seed := range order {
		if done[seed] {
			continue
		}
		if normals[seed].Z < 0 {
			normals[seed] = r3.Scale(-1, normals[seed])
		}
		done[seed] = true
		h = h[:0]
		push := func(u int32) {
			for _, v := range adj[deg[u]:deg[u+1]] {
				if !done[v] {
					c := 1 - math.Abs(r3.Dot(normals[u], normals[v]))
					h.push(mstEdge{cost: c, to: v, from: u})
				}
			}
		}
		push(seed)
		for len(h) > 0 {
			e := h.pop()
			if done[e.to] {
				continue
			}
			done[e.to] = true
			if r3.Dot(normals[e.to], normals[e.from]) < 0 {
				normals[e.to] = r3.Scale(-1, normals[e.to])
			}
			push(e.to)
		}
	}
}

type mstEdge struct {
	cost     float64
	to, from int32
}

// edgeHeap is a binary min-heap by cost, ties broken by target and
// source index so that the tree does not depend on insertion order.
type edgeHeap []mstEdge

func (e mstEdge) less(o mstEdge) bool {
	if e.cost != o.cost {
		return e.cost < o.cost
	}
	if e.to != o.to {
		return e.to < o.to
	}
	return e.from < o.from
}

func (h *edgeHeap) push(e mstEdge) {
	*h = append(*h, e)
	s := *h
	for i := len(s) - 1; i > 0; {
		p := (i - 1) / 2
		if !s[i].less(s[p]) {
			break
		}
		s[i], s[p] = s[p], s[i]
		i = p
	}
}

func (h *edgeHeap) pop() mstEdge {
	s := *h
	top := s[0]
	last := len(s) - 1
	s[0] = s[last]
	s = s[:last]
	for i := 0; ; {
		l, r, m := 2*i+1, 2*i+2, i
		if l < len(s) && s[l].less(s[m]) {
			m = l
		}
		if r < len(s) && s[r].less(s[m]) {
			m = r
		}
		if m == i {
			break
		}
		s[i], s[m] = s[m], s[i]
		i = m
	}
	*h = s
	return top
}

// covAccumulator sums points for a covariance, shifted by the first
// point to keep the sums small (the covariance is shift-invariant).
type covAccumulator struct {
	n      int
	origin r3.Vec
	s      [3]float64 // Σ x
	ss     [6]float64 // Σ xxᵀ: xx, xy, xz, yy, yz, zz
}

func (a *covAccumulator) add(p r3.Vec) {
	if a.n == 0 {
		a.origin = p
	}
	a.n++
	x, y, z := p.X-a.origin.X, p.Y-a.origin.Y, p.Z-a.origin.Z
	a.s[0] += x
	a.s[1] += y
	a.s[2] += z
	a.ss[0] += x * x
	a.ss[1] += x * y
	a.ss[2] += x * z
	a.ss[3] += y * y
	a.ss[4] += y * z
	a.ss[5] += z * z
}

// cov returns the covariance matrix (divided by n).
func (a *covAccumulator) cov() [3][3]float64 {
	f := 1 / float64(a.n)
	mx, my, mz := a.s[0]*f, a.s[1]*f, a.s[2]*f
	xx := a.ss[0]*f - mx*mx
	xy := a.ss[1]*f - mx*my
	xz := a.ss[2]*f - mx*mz
	yy := a.ss[3]*f - my*my
	yz := a.ss[4]*f - my*mz
	zz := a.ss[5]*f - mz*mz
	return [3][3]float64{{xx, xy, xz}, {xy, yy, yz}, {xz, yz, zz}}
}

// normal returns the unit eigenvector of the smallest covariance
// eigenvalue, or the zero vector for fewer than three points.
func (a *covAccumulator) normal() r3.Vec {
	if a.n < 3 {
		return r3.Vec{}
	}
	_, vecs := symEig3(a.cov())
	return vecs[0]
}

// symEig3 returns the eigenvalues of the symmetric 3×3 matrix a in
// ascending order with their unit eigenvectors, by cyclic Jacobi
// rotations (Golub & Van Loan, Matrix Computations, 4th ed., §8.5):
// unconditionally stable and accurate for symmetric matrices, and at
// this size a handful of sweeps reach machine precision.
func symEig3(a [3][3]float64) ([3]float64, [3]r3.Vec) {
	v := [3][3]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
	for sweep := 0; sweep < 50; sweep++ {
		off := a[0][1]*a[0][1] + a[0][2]*a[0][2] + a[1][2]*a[1][2]
		diag := a[0][0]*a[0][0] + a[1][1]*a[1][1] + a[2][2]*a[2][2]
		if off <= 1e-30*diag || off == 0 {
			break
		}
		for p := 0; p < 2; p++ {
			for q := p + 1; q < 3; q++ {
				if a[p][q] == 0 {
					continue
				}
				// Rotation angle that zeroes a[p][q] (Golub & Van Loan
				// Algorithm 8.5.1, the symmetric Schur decomposition).
				tau := (a[q][q] - a[p][p]) / (2 * a[p][q])
				var t float64
				if tau >= 0 {
					t = 1 / (tau + math.Sqrt(1+tau*tau))
				} else {
					t = -1 / (-tau + math.Sqrt(1+tau*tau))
				}
				c := 1 / math.Sqrt(1+t*t)
				s := t * c
				for k := 0; k < 3; k++ { // A ← A·J
					akp, akq := a[k][p], a[k][q]
					a[k][p] = c*akp - s*akq
					a[k][q] = s*akp + c*akq
				}
				for k := 0; k < 3; k++ { // A ← Jᵀ·A
					apk, aqk := a[p][k], a[q][k]
					a[p][k] = c*apk - s*aqk
					a[q][k] = s*apk + c*aqk
				}
				for k := 0; k < 3; k++ { // V ← V·J
					vkp, vkq := v[k][p], v[k][q]
					v[k][p] = c*vkp - s*vkq
					v[k][q] = s*vkp + c*vkq
				}
			}
		}
	}
	idx := [3]int{0, 1, 2} // sorted by eigenvalue, ties by index
	for i := 1; i < 3; i++ {
		for j := i; j > 0 && a[idx[j]][idx[j]] < a[idx[j-1]][idx[j-1]]; j-- {
			idx[j], idx[j-1] = idx[j-1], idx[j]
		}
	}
	var vals [3]float64
	var vecs [3]r3.Vec
	for r, i := range idx {
		vals[r] = a[i][i]
		vecs[r] = Normalize(r3.Vec{X: v[0][i], Y: v[1][i], Z: v[2][i]})
	}
	return vals, vecs
}
