package mesh

import (
	"cmp"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
)

// The k-d tree is checked against a brute-force oracle: a linear scan
// over every point with the same squared-distance formula and the same
// tie rule (smaller index first), in the manner of gonum's
// spatial/kdtree tests. Results must agree exactly, indices and squared
// distances alike, because both sides compute each distance with the
// same floating-point operations.

func kdOracleDist2(p, q r3.Vec) float64 { return sq3(p.X-q.X, p.Y-q.Y, p.Z-q.Z) }

func kdOracleNearest(pts []r3.Vec, q r3.Vec) (int, float64) {
	best, bestD := -1, math.Inf(1)
	if !isFinite(q) {
		return best, bestD
	}
	for i, p := range pts {
		if !isFinite(p) {
			continue
		}
		if d := kdOracleDist2(p, q); d < bestD {
			best, bestD = i, d
		}
	}
	return best, bestD
}

func kdOracleKNearest(pts []r3.Vec, q r3.Vec, k int) []Neighbor {
	if k <= 0 || !isFinite(q) {
		return nil
	}
	var all []Neighbor
	for i, p := range pts {
		if isFinite(p) {
			all = append(all, Neighbor{Index: i, Dist2: kdOracleDist2(p, q)})
		}
	}
	slices.SortFunc(all, func(a, b Neighbor) int {
		return cmp.Or(cmp.Compare(a.Dist2, b.Dist2), cmp.Compare(a.Index, b.Index))
	})
	return all[:min(k, len(all))]
}

func kdOracleRadius(pts []r3.Vec, q r3.Vec, r float64) []int {
	if !(r >= 0) || !isFinite(q) {
		return nil
	}
	var out []int
	for i, p := range pts {
		if isFinite(p) && kdOracleDist2(p, q) <= r*r {
			out = append(out, i)
		}
	}
	return out
}

// Point-cloud generators for the oracle tests, each from a fixed seed.

func kdUniformCloud(rng *rand.Rand, n int) []r3.Vec {
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = r3.Vec{X: rng.Float64(), Y: rng.Float64(), Z: rng.Float64()}
	}
	return pts
}

// kdClusteredCloud draws n points around 5 centres with a spread of 1% of
// the unit cube, a stand-in for a scanned surface's uneven density.
func kdClusteredCloud(rng *rand.Rand, n int) []r3.Vec {
	centres := kdUniformCloud(rng, 5)
	pts := make([]r3.Vec, n)
	for i := range pts {
		c := centres[rng.IntN(len(centres))]
		pts[i] = r3.Add(c, r3.Vec{X: 0.01 * rng.NormFloat64(), Y: 0.01 * rng.NormFloat64(), Z: 0.01 * rng.NormFloat64()})
	}
	return pts
}

// kdDuplicateCloud draws n points from only 7 distinct locations, so most
// queries meet ties.
func kdDuplicateCloud(rng *rand.Rand, n int) []r3.Vec {
	base := kdUniformCloud(rng, 7)
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = base[rng.IntN(len(base))]
	}
	return pts
}

// kdCollinearCloud puts n points on one line, so two axes have no extent.
func kdCollinearCloud(rng *rand.Rand, n int) []r3.Vec {
	dir := r3.Vec{X: 1, Y: 2, Z: -0.5}
	pts := make([]r3.Vec, n)
	for i := range pts {
		pts[i] = r3.Scale(rng.Float64(), dir)
	}
	return pts
}

// kdGridCloud puts points on an integer lattice (exact squared distances,
// many exact ties), shuffled.
func kdGridCloud(rng *rand.Rand, side int) []r3.Vec {
	var pts []r3.Vec
	for x := 0; x < side; x++ {
		for y := 0; y < side; y++ {
			for z := 0; z < side; z++ {
				pts = append(pts, r3.Vec{X: float64(x), Y: float64(y), Z: float64(z)})
			}
		}
	}
	rng.Shuffle(len(pts), func(i, j int) { pts[i], pts[j] = pts[j], pts[i] })
	return pts
}

type kdCloudCase struct {
	name string
	pts  []r3.Vec
	// scale is the extent of the cloud, for choosing radii and query
	// points around it.
	scale float64
}

func kdCloudCases() []kdCloudCase {
	rng := rand.New(rand.NewPCG(1, 2))
	withNaN := kdUniformCloud(rng, 300)
	withNaN[3].X = math.NaN()
	withNaN[77].Z = math.Inf(1)
	withNaN[150] = r3.Vec{X: math.Inf(-1), Y: math.NaN(), Z: 0}
	return []kdCloudCase{
		{"empty", nil, 1},
		{"single", []r3.Vec{{X: 0.5, Y: -0.25, Z: 2}}, 1},
		{"two-equal", []r3.Vec{{X: 1, Y: 1, Z: 1}, {X: 1, Y: 1, Z: 1}}, 1},
		{"bucket", kdUniformCloud(rng, kdBucket), 1},
		{"bucket+1", kdUniformCloud(rng, kdBucket+1), 1},
		{"uniform-1000", kdUniformCloud(rng, 1000), 1},
		{"uniform-5003", kdUniformCloud(rng, 5003), 1},
		{"clustered-3000", kdClusteredCloud(rng, 3000), 1},
		{"duplicates-2000", kdDuplicateCloud(rng, 2000), 1},
		{"collinear-1500", kdCollinearCloud(rng, 1500), 2},
		{"grid-12", kdGridCloud(rng, 12), 12},
		{"non-finite-300", withNaN, 1},
	}
}

// queries returns query points for a cloud: random points in and around
// its extent, and points of the cloud itself (exact hits).
func kdQueries(rng *rand.Rand, c kdCloudCase, n int) []r3.Vec {
	var qs []r3.Vec
	for i := 0; i < n; i++ {
		qs = append(qs, r3.Vec{
			X: (1.4*rng.Float64() - 0.2) * c.scale,
			Y: (1.4*rng.Float64() - 0.2) * c.scale,
			Z: (1.4*rng.Float64() - 0.2) * c.scale,
		})
		if len(c.pts) > 0 {
			qs = append(qs, c.pts[rng.IntN(len(c.pts))])
		}
	}
	// On the grid, half-integer queries are equidistant from up to 8
	// lattice points.
	qs = append(qs, r3.Vec{X: 2.5, Y: 3.5, Z: 4.5}, r3.Vec{X: 2.5, Y: 3, Z: 4})
	return qs
}

func TestKDTreeNearestMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, c := range kdCloudCases() {
		tree := NewKDTree(c.pts)
		for _, q := range kdQueries(rng, c, 200) {
			gotI, gotD := tree.Nearest(q)
			wantI, wantD := kdOracleNearest(c.pts, q)
			if gotI != wantI || gotD != wantD {
				t.Fatalf("%s: Nearest(%v) = (%d, %g), want (%d, %g)", c.name, q, gotI, gotD, wantI, wantD)
			}
		}
	}
}

// TestKDTreeNearestWithinMatchesBruteForce: the bounded query agrees
// with the oracle's nearest point whenever that lies within the bound
// (inclusive: the bound is set to some queries' exact nearest squared
// distance) and finds nothing otherwise.
func TestKDTreeNearestWithinMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, c := range kdCloudCases() {
		tree := NewKDTree(c.pts)
		for k, q := range kdQueries(rng, c, 200) {
			wantI, wantD := kdOracleNearest(c.pts, q)
			bounds := []float64{0, 1e-6, 0.01, 1, math.Inf(1)}
			if wantI >= 0 {
				bounds = append(bounds, wantD, math.Nextafter(wantD, 0))
			}
			for _, b := range bounds {
				gotI, gotD := tree.NearestWithin(q, b)
				ei, ed := wantI, wantD
				if !(wantD <= b) {
					ei, ed = -1, math.Inf(1)
				}
				if gotI != ei || gotD != ed {
					t.Fatalf("%s query %d: NearestWithin(%v, %g) = (%d, %g), want (%d, %g)", c.name, k, q, b, gotI, gotD, ei, ed)
				}
			}
		}
		if i, d := tree.NearestWithin(r3.Vec{}, math.NaN()); i != -1 || !math.IsInf(d, 1) {
			t.Errorf("%s: a NaN bound gave (%d, %g)", c.name, i, d)
		}
	}
}

func TestKDTreeKNearestMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	var buf []Neighbor
	for _, c := range kdCloudCases() {
		tree := NewKDTree(c.pts)
		for _, k := range []int{0, 1, 2, 10, 33, len(c.pts) + 5} {
			for _, q := range kdQueries(rng, c, 40) {
				buf = tree.KNearest(q, k, buf)
				want := kdOracleKNearest(c.pts, q, k)
				if len(buf) != len(want) || (len(want) > 0 && !slices.Equal(buf, want)) {
					t.Fatalf("%s: KNearest(%v, %d) =\n%v\nwant\n%v", c.name, q, k, buf, want)
				}
			}
		}
	}
}

func TestKDTreeRadiusMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	var buf []int
	for _, c := range kdCloudCases() {
		tree := NewKDTree(c.pts)
		// Radii from nothing to everything; on the grid, integer radii
		// put many points exactly on the sphere (distance == r).
		for _, r := range []float64{-1, 0, 0.01 * c.scale, 0.05 * c.scale, 0.2 * c.scale, 1, 2, 3 * c.scale, math.Inf(1), math.NaN()} {
			for _, q := range kdQueries(rng, c, 25) {
				buf = tree.Radius(q, r, buf)
				want := kdOracleRadius(c.pts, q, r)
				if len(buf) != len(want) || (len(want) > 0 && !slices.Equal(buf, want)) {
					t.Fatalf("%s: Radius(%v, %g) = %v, want %v", c.name, q, r, buf, want)
				}
			}
		}
	}
}

func TestKDTreeNonFiniteQueries(t *testing.T) {
	tree := NewKDTree(kdUniformCloud(rand.New(rand.NewPCG(9, 9)), 100))
	for _, q := range []r3.Vec{{X: math.NaN()}, {Y: math.Inf(1)}, {Z: math.Inf(-1)}} {
		if i, d := tree.Nearest(q); i != -1 || !math.IsInf(d, 1) {
			t.Errorf("Nearest(%v) = (%d, %g), want (-1, +Inf)", q, i, d)
		}
		if got := tree.KNearest(q, 3, nil); len(got) != 0 {
			t.Errorf("KNearest(%v) = %v, want none", q, got)
		}
		if got := tree.Radius(q, math.Inf(1), nil); len(got) != 0 {
			t.Errorf("Radius(%v) = %v, want none", q, got)
		}
	}
}

func TestKDTreeLen(t *testing.T) {
	for _, c := range kdCloudCases() {
		want := 0
		for _, p := range c.pts {
			if isFinite(p) {
				want++
			}
		}
		if got := NewKDTree(c.pts).Len(); got != want {
			t.Errorf("%s: Len() = %d, want %d", c.name, got, want)
		}
	}
}

// TestKDTreeInvariants checks the layout itself: every leaf holds at
// most kdBucket points, every point left of a split is ≤ the split value
// and every point right of it ≥, and the index array is a permutation of
// the finite input points with their coordinates.
func TestKDTreeInvariants(t *testing.T) {
	for _, c := range kdCloudCases() {
		tree := NewKDTree(c.pts)
		var walk func(node, lo, hi, level int)
		walk = func(node, lo, hi, level int) {
			if level == tree.depth {
				if hi-lo > kdBucket {
					t.Errorf("%s: leaf [%d,%d) holds %d > %d points", c.name, lo, hi, hi-lo, kdBucket)
				}
				return
			}
			n := tree.nodes[node]
			mid := lo + (hi-lo)/2
			for i := lo; i < mid; i++ {
				if v := tree.coords[3*i+n.axis]; v > n.split {
					t.Errorf("%s: node %d: left point %d has %g > split %g", c.name, node, i, v, n.split)
				}
			}
			for i := mid; i < hi; i++ {
				if v := tree.coords[3*i+n.axis]; v < n.split {
					t.Errorf("%s: node %d: right point %d has %g < split %g", c.name, node, i, v, n.split)
				}
			}
			walk(2*node+1, lo, mid, level+1)
			walk(2*node+2, mid, hi, level+1)
		}
		walk(0, 0, tree.Len(), 0)
		seen := make(map[int32]bool)
		for slot, i := range tree.index {
			if seen[i] {
				t.Fatalf("%s: index %d appears twice", c.name, i)
			}
			seen[i] = true
			p := c.pts[i]
			if got := (r3.Vec{X: tree.coords[3*slot], Y: tree.coords[3*slot+1], Z: tree.coords[3*slot+2]}); got != p {
				t.Fatalf("%s: slot %d holds %v for index %d, want %v", c.name, slot, got, i, p)
			}
		}
	}
}

func TestKDTreeCopiesInput(t *testing.T) {
	pts := []r3.Vec{{X: 0}, {X: 1}, {X: 2}}
	tree := NewKDTree(pts)
	pts[0] = r3.Vec{X: 100}
	if i, d := tree.Nearest(r3.Vec{X: 0.1}); i != 0 || math.Abs(d-0.01) > 1e-15 {
		t.Errorf("after changing the input, Nearest = (%d, %g), want (0, 0.01)", i, d)
	}
}

// TestKDTreeConcurrent queries one tree from several goroutines and
// compares with sequential answers (run with -race to check that queries
// only read the tree).
func TestKDTreeConcurrent(t *testing.T) {
	rng := rand.New(rand.NewPCG(10, 11))
	pts := kdClusteredCloud(rng, 4000)
	tree := NewKDTree(pts)
	qs := kdUniformCloud(rng, 400)
	want := make([][]Neighbor, len(qs))
	for i, q := range qs {
		want[i] = tree.KNearest(q, 8, nil)
	}
	var wg sync.WaitGroup
	errs := make(chan string, 4)
	for w := 0; w < 4; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var buf []Neighbor
			for i, q := range qs {
				buf = tree.KNearest(q, 8, buf)
				if !slices.Equal(buf, want[i]) {
					errs <- fmt.Sprintf("query %d: got %v, want %v", i, buf, want[i])
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for e := range errs {
		t.Error(e)
	}
}

func TestKDTreeQueriesDoNotAllocate(t *testing.T) {
	rng := rand.New(rand.NewPCG(12, 13))
	tree := NewKDTree(kdUniformCloud(rng, 2000))
	q := r3.Vec{X: 0.3, Y: 0.6, Z: 0.2}
	nb := make([]Neighbor, 0, 16)
	idx := make([]int, 0, 256)
	if a := testing.AllocsPerRun(50, func() { tree.Nearest(q) }); a != 0 {
		t.Errorf("Nearest allocates %v times per query", a)
	}
	if a := testing.AllocsPerRun(50, func() { nb = tree.KNearest(q, 10, nb) }); a != 0 {
		t.Errorf("KNearest allocates %v times per query", a)
	}
	if a := testing.AllocsPerRun(50, func() { idx = tree.Radius(q, 0.1, idx) }); a != 0 {
		t.Errorf("Radius allocates %v times per query", a)
	}
}

// Benchmarks: each query kind on the tree beside the brute-force scan it
// replaces, on a uniform cloud in the unit cube. The Radius benchmark's
// r = 0.02 holds on average 4/3·π·0.02³·n points: about 3.4 at n = 100k
// and 0.3 at n = 10k. The brute-force k-nearest sorts every distance, as
// the oracle does.

var kdBenchSizes = []int{10_000, 100_000}

func BenchmarkKDTreeBuild(b *testing.B) {
	for _, n := range kdBenchSizes {
		pts := kdUniformCloud(rand.New(rand.NewPCG(1, uint64(n))), n)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			for b.Loop() {
				NewKDTree(pts)
			}
		})
	}
}

func kdBenchQueries(b *testing.B, run func(b *testing.B, pts []r3.Vec, tree *KDTree, qs []r3.Vec)) {
	for _, n := range kdBenchSizes {
		rng := rand.New(rand.NewPCG(2, uint64(n)))
		pts := kdUniformCloud(rng, n)
		tree := NewKDTree(pts)
		qs := kdUniformCloud(rng, 1024)
		b.Run(fmt.Sprintf("tree/n=%d", n), func(b *testing.B) { run(b, pts, tree, qs) })
		b.Run(fmt.Sprintf("brute/n=%d", n), func(b *testing.B) { run(b, pts, nil, qs) })
	}
}

func BenchmarkKDTreeNearest(b *testing.B) {
	kdBenchQueries(b, func(b *testing.B, pts []r3.Vec, tree *KDTree, qs []r3.Vec) {
		i := 0
		for b.Loop() {
			q := qs[i%len(qs)]
			i++
			if tree != nil {
				tree.Nearest(q)
			} else {
				kdOracleNearest(pts, q)
			}
		}
	})
}

func BenchmarkKDTreeKNearest10(b *testing.B) {
	kdBenchQueries(b, func(b *testing.B, pts []r3.Vec, tree *KDTree, qs []r3.Vec) {
		buf := make([]Neighbor, 0, 10)
		i := 0
		for b.Loop() {
			q := qs[i%len(qs)]
			i++
			if tree != nil {
				buf = tree.KNearest(q, 10, buf)
			} else {
				kdOracleKNearest(pts, q, 10)
			}
		}
	})
}

func BenchmarkKDTreeRadius(b *testing.B) {
	kdBenchQueries(b, func(b *testing.B, pts []r3.Vec, tree *KDTree, qs []r3.Vec) {
		buf := make([]int, 0, 64)
		i := 0
		for b.Loop() {
			q := qs[i%len(qs)]
			i++
			if tree != nil {
				buf = tree.Radius(q, 0.02, buf)
			} else {
				kdOracleRadius(pts, q, 0.02)
			}
		}
	})
}

func ExampleKDTree() {
	// Eight corners of a 10 cm cube.
	var corners []r3.Vec
	for i := 0; i < 8; i++ {
		corners = append(corners, r3.Vec{X: 0.1 * float64(i&1), Y: 0.1 * float64(i>>1&1), Z: 0.1 * float64(i>>2&1)})
	}
	tree := NewKDTree(corners)

	i, d2 := tree.Nearest(r3.Vec{X: 0.09, Y: 0.01, Z: 0.02})
	fmt.Printf("nearest: corner %d at %.3f m\n", i, math.Sqrt(d2))

	// The three corners sharing an edge with corner 0 are at 0.1 m; the
	// query ties them, and ties come back in index order.
	for _, nb := range tree.KNearest(r3.Vec{}, 4, nil) {
		fmt.Printf("corner %d at %.3f m\n", nb.Index, math.Sqrt(nb.Dist2))
	}
	fmt.Println("within 0.1 m of corner 7:", tree.Radius(corners[7], 0.1, nil))
	// Output:
	// nearest: corner 1 at 0.024 m
	// corner 0 at 0.000 m
	// corner 1 at 0.100 m
	// corner 2 at 0.100 m
	// corner 4 at 0.100 m
	// within 0.1 m of corner 7: [3 5 6 7]
}
