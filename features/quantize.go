package features

import (
	"math"
)

// cosBins quantises an angle θ ∈ [0, π], given by its cosine c = cos θ,
// into n bins of width π/n without calling acos: bin b covers
// θ ∈ [b·π/n, (b+1)·π/n), and the edge between bins b−1 and b is the
// cosine e_b = cos(b·π/n). The bin of c is, by definition,
//
//	bin(c) = #{ b ∈ 1..n−1 : c ≤ e_b },
//
// which equals ⌊acos(c)/(π/n)⌋ except when c lies within rounding of an
// edge. The edges are the float64 values math.Cos(b·π/n); the same table
// quantises model and scene pairs, so both see identical bin edges.
//
// For speed a look-up table over c ∈ [−1, 1] gives, for each of its
// cells, the bin at the cell's upper end; cells are narrower than the
// narrowest bin (1 − cos(π/n), at both ends), so at most one edge lies in
// a cell and one comparison with the next edge finishes the job.
type cosBins struct {
	n     int
	edges []float64 // edges[b] = cos(b·π/n), b = 0..n (edges[0] = 1, edges[n] = −1)
	mids  []float64 // mids[b] = cos((b+½)·π/n), the cosine of bin b's middle
	lut   []uint8   // lut[j] = bin(−1 + (j+1)/scale)
	scale float64   // cells per unit of c: len(lut)/2
}

func newCosBins(n int) *cosBins {
	q := &cosBins{n: n, edges: make([]float64, n+1), mids: make([]float64, n)}
	w := math.Pi / float64(n)
	for b := 0; b <= n; b++ {
		q.edges[b] = math.Cos(float64(b) * w)
	}
	q.edges[0], q.edges[n] = 1, -1
	for b := 0; b < n; b++ {
		q.mids[b] = math.Cos((float64(b) + 0.5) * w)
	}
	// The narrowest bins are the first and last: 1 − cos(π/n) wide in c.
	// Four cells per narrowest bin keeps at most one edge per cell with
	// a wide margin.
	gap := 1 - math.Cos(w)
	cells := int(math.Ceil(2/gap)) * 4
	q.lut = make([]uint8, cells)
	q.scale = float64(cells) / 2
	for j := range q.lut {
		q.lut[j] = uint8(q.exact(min(1, -1+float64(j+1)/q.scale)))
	}
	return q
}

// exact is the defining rule, by linear count over the edges.
func (q *cosBins) exact(c float64) int {
	b := 0
	for k := 1; k < q.n; k++ {
		if c <= q.edges[k] {
			b++
		}
	}
	return b
}

// bin returns the bin of cosine c; c outside [−1, 1] (rounding) is
// clamped, and NaN maps to bin n−1 (θ = π).
func (q *cosBins) bin(c float64) int {
	if !(c >= -1) {
		c = -1
	} else if c > 1 {
		c = 1
	}
	j := int((c + 1) * q.scale)
	if j >= len(q.lut) {
		j = len(q.lut) - 1
	}
	b := int(q.lut[j])
	if b+1 < q.n && c <= q.edges[b+1] {
		b++
	}
	return b
}

// neighbour returns the bin next to b on the side of the nearer edge for
// the value c in bin b (Hinterstoisser et al. 2016 spread votes into
// neighbouring bins), or −1 when that side is outside [0, n).
func (q *cosBins) neighbour(c float64, b int) int {
	if c > q.mids[b] { // angle in the lower half of the bin
		return b - 1 // −1 when b == 0
	}
	if b+1 < q.n {
		return b + 1
	}
	return -1
}

// Quantisation holds the bin tables derived from a table's parameters:
// the feature quantisation of Drost et al. (2010) and the finer α
// quantisation. Model tables and scene voting build theirs from the same
// parameters, so both use identical bin edges.
type quantizer struct {
	distStep    float64 // metres
	invStep     float64
	distBins    int      // nD
	angleBins   int      // n, bins over 2π (Drost's n_angle)
	featBins    int      // n/2, bins over [0, π] for the three feature angles
	alphaLevels int      // L = n·alphaSub fine levels of the angle φ over [−π, π)
	alphaSub    int      // fine levels per α bin
	feat        *cosBins // n/2 bins over [0, π]
	half        *cosBins // L/2 fine bins over [0, π] for φ
	keySpace    int      // nD·(n/2)³
	planarBin   [2]int   // the feature-angle bins whose range touches 90°
	// alphaBin[x] is the α bin of the fine level x mod L, for x in
	// [0, 2L), so that a vote's bin is alphaBin[φ_s + L − φ_m] without
	// a division; alphaNbr[x] is the neighbouring α bin on the side of
	// the nearer edge (cyclic).
	alphaBin, alphaNbr []uint8
}

func newQuantizer(p Params, diameter float64) *quantizer {
	q := &quantizer{
		distStep:  p.DistanceStep * diameter,
		angleBins: p.AngleBins,
		featBins:  p.AngleBins / 2,
	}
	q.invStep = 1 / q.distStep
	q.distBins = distanceBins(p.DistanceStep)
	q.alphaSub = alphaSubdivision(p.AngleBins)
	q.alphaLevels = p.AngleBins * q.alphaSub
	q.feat = newCosBins(q.featBins)
	q.half = newCosBins(q.alphaLevels / 2)
	q.keySpace = q.distBins * q.featBins * q.featBins * q.featBins
	q.alphaBin = make([]uint8, 2*q.alphaLevels)
	q.alphaNbr = make([]uint8, 2*q.alphaLevels)
	for x := range q.alphaBin {
		lvl := x % q.alphaLevels
		b := lvl / q.alphaSub
		nb := b + 1
		if 2*(lvl-b*q.alphaSub) < q.alphaSub {
			nb = b - 1
		}
		q.alphaBin[x] = uint8(b)
		q.alphaNbr[x] = uint8((nb + q.angleBins) % q.angleBins)
	}
	// 90° is at featBins/2 bin widths: inside bin ⌊featBins/2⌋ when
	// featBins is odd (the default 15 gives bin 7, [84°, 96°)), on the
	// edge between two bins when it is even.
	if q.featBins%2 == 1 {
		q.planarBin = [2]int{q.featBins / 2, q.featBins / 2}
	} else {
		q.planarBin = [2]int{q.featBins/2 - 1, q.featBins / 2}
	}
	return q
}

// distanceBins is the number of distance bins for a step of tau·diameter:
// pairs are at most one diameter apart, so ⌊1/τ⌋ + 1 bins hold them all
// (the last one only pairs at the full diameter when 1/τ is whole).
func distanceBins(tau float64) int {
	return int(math.Floor(1/tau+1e-9)) + 1
}

// alphaSubdivision is the number of fine φ levels per α bin: the largest
// k with n·k ≤ 256, so that a fine level fits a byte (30 bins give 8, so
// 240 levels of 1.5°).
func alphaSubdivision(n int) int { return 256 / n }

// distBin returns the distance bin of a pair at distance dist (metres)
// and the neighbouring bin on the side of the nearer edge (−1 when that
// is outside the range).
func (q *quantizer) distBin(dist float64) (b, nb int) {
	x := dist * q.invStep
	b = int(x)
	if b >= q.distBins {
		b = q.distBins - 1
		return b, b - 1
	}
	if x-float64(b) < 0.5 {
		return b, b - 1
	}
	if b+1 < q.distBins {
		return b, b + 1
	}
	return b, -1
}

// key packs the quantised feature into one integer: a perfect (collision-
// free) hash of the four dimensions in mixed radix, distance slowest.
func (q *quantizer) key(d, a1, a2, a3 int) uint32 {
	f := q.featBins
	return uint32(((d*f+a1)*f+a2)*f + a3)
}

// unkey splits a key into its four quantised dimensions.
func (q *quantizer) unkey(k uint32) (d, a1, a2, a3 int) {
	f := uint32(q.featBins)
	a3 = int(k % f)
	k /= f
	a2 = int(k % f)
	k /= f
	a1 = int(k % f)
	d = int(k / f)
	return
}

// planar reports whether the angle bins are those of a coplanar pair:
// both normals perpendicular to d (the bins touching 90°) and parallel to
// each other (bin 0 of ∠(n1, n2)).
func (q *quantizer) planar(a1, a2, a3 int) bool {
	return a3 == 0 &&
		(a1 == q.planarBin[0] || a1 == q.planarBin[1]) &&
		(a2 == q.planarBin[0] || a2 == q.planarBin[1])
}

// phi returns the fine level of the angle φ = atan2(z, y) ∈ [−π, π) of
// the vector (y, z): level ⌊(φ + π)/(2π/L)⌋ ∈ [0, L), computed from the
// cosine y/r with the half-circle table. The zero vector (a paired
// point on the reference normal's line, where α is undefined) gets
// level L/2 (φ = 0).
func (q *quantizer) phi(y, z float64) int {
	r := math.Sqrt(y*y + z*z)
	half := q.alphaLevels / 2
	if r == 0 {
		return half
	}
	c := y / r
	if z >= 0 {
		// φ = acos(c) ∈ [0, π]: (φ + π)/w = L/2 + acos(c)/w.
		return half + q.half.bin(c)
	}
	// φ = −acos(c) ∈ (−π, 0): (φ + π)/w = (π − acos(c))/w = acos(−c)/w.
	return q.half.bin(-c)
}

// alphaAngle returns the rotation angle about x (radians, in [0, 2π))
// that α bin b stands for. A fine difference Δ = φ_s − φ_m of two
// floored levels estimates the angle Δ·w (w = 2π/L) without bias, and
// bin b holds Δ = b·k … b·k + k − 1 (k fine levels per bin), so the bin
// stands for the middle of those: (b·k + (k−1)/2)·w.
func (q *quantizer) alphaAngle(b int) float64 {
	k := float64(q.alphaSub)
	return (float64(b)*k + (k-1)/2) * 2 * math.Pi / float64(q.alphaLevels)
}
