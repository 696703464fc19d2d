package features

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestCosBinsMatchesAcos checks the acos-free quantiser against its
// defining rule (count of edges ≥ c) everywhere, and against
// ⌊acos(c)/(π/n)⌋ from the standard library's math.Acos away from the
// edges, where rounding cannot decide the bin.
func TestCosBinsMatchesAcos(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, n := range []int{2, 3, 15, 32, 120} {
		q := newCosBins(n)
		w := math.Pi / float64(n)
		check := func(c float64) {
			got := q.bin(c)
			if want := q.exact(c); got != want {
				t.Fatalf("n=%d: bin(%v) = %d, defining rule gives %d", n, c, got, want)
			}
			if c > 1 || c < -1 {
				return
			}
			th := math.Acos(c)
			frac := th/w - math.Floor(th/w)
			if frac < 1e-9 || frac > 1-1e-9 {
				return // within rounding of an edge
			}
			want := min(n-1, int(th/w))
			if got != want {
				t.Fatalf("n=%d: bin(%v) = %d, ⌊acos/w⌋ = %d", n, c, got, want)
			}
		}
		for i := 0; i < 20000; i++ {
			check(2*rng.Float64() - 1)
		}
		for b := 0; b <= n; b++ {
			e := q.edges[b]
			check(e)
			check(math.Nextafter(e, 2))
			check(math.Nextafter(e, -2))
		}
		// Out-of-range and NaN inputs clamp.
		if got := q.bin(1.0000001); got != 0 {
			t.Errorf("n=%d: bin(1+) = %d, want 0", n, got)
		}
		if got := q.bin(-1.0000001); got != n-1 {
			t.Errorf("n=%d: bin(-1-) = %d, want %d", n, got, n-1)
		}
		if got := q.bin(math.NaN()); got != n-1 {
			t.Errorf("n=%d: bin(NaN) = %d, want %d", n, got, n-1)
		}
	}
}

// TestCosBinsNeighbour checks that the neighbour is on the side of the
// nearer edge: the angle's position in its bin, from math.Acos, decides.
func TestCosBinsNeighbour(t *testing.T) {
	q := newCosBins(15)
	w := math.Pi / 15
	rng := rand.New(rand.NewPCG(3, 4))
	for i := 0; i < 10000; i++ {
		th := rng.Float64() * math.Pi
		c := math.Cos(th)
		b := q.bin(c)
		frac := th/w - float64(b)
		if math.Abs(frac-0.5) < 1e-9 {
			continue
		}
		want := b + 1
		if frac < 0.5 {
			want = b - 1
		}
		if want >= 15 {
			want = -1
		}
		if got := q.neighbour(c, b); got != want {
			t.Fatalf("θ=%v in bin %d (frac %.3f): neighbour %d, want %d", th, b, frac, got, want)
		}
	}
}

// TestPhiMatchesAtan2 checks the fine φ level against
// ⌊(atan2(z, y) + π)/(2π/L)⌋ computed with the standard library.
func TestPhiMatchesAtan2(t *testing.T) {
	q := newQuantizer(DefaultParams(), 1)
	L := q.alphaLevels
	if L != 240 {
		t.Fatalf("alpha levels %d, want 240 for 30 bins", L)
	}
	w := 2 * math.Pi / float64(L)
	rng := rand.New(rand.NewPCG(5, 6))
	for i := 0; i < 50000; i++ {
		y, z := rng.NormFloat64(), rng.NormFloat64()
		if i%100 == 0 {
			z = 0 // the half-plane boundary itself
		}
		x := (math.Atan2(z, y) + math.Pi) / w
		frac := x - math.Floor(x)
		if frac < 1e-9 || frac > 1-1e-9 {
			continue
		}
		want := int(x) % L
		if got := q.phi(y, z); got != want {
			t.Fatalf("phi(%v, %v) = %d, want %d", y, z, got, want)
		}
	}
	if got := q.phi(0, 0); got != L/2 {
		t.Errorf("phi(0, 0) = %d, want %d (φ = 0)", got, L/2)
	}
}

func TestKeyRoundTrip(t *testing.T) {
	q := newQuantizer(DefaultParams(), 1)
	if q.distBins != 21 || q.featBins != 15 || q.keySpace != 21*15*15*15 {
		t.Fatalf("distBins %d featBins %d keySpace %d", q.distBins, q.featBins, q.keySpace)
	}
	seen := map[uint32]bool{}
	for d := 0; d < q.distBins; d++ {
		for a1 := 0; a1 < 15; a1++ {
			for a2 := 0; a2 < 15; a2++ {
				for a3 := 0; a3 < 15; a3++ {
					k := q.key(d, a1, a2, a3)
					if int(k) >= q.keySpace || seen[k] {
						t.Fatalf("key %d of (%d %d %d %d) out of range or repeated", k, d, a1, a2, a3)
					}
					seen[k] = true
					if gd, g1, g2, g3 := q.unkey(k); gd != d || g1 != a1 || g2 != a2 || g3 != a3 {
						t.Fatalf("unkey(key(%d %d %d %d)) = %d %d %d %d", d, a1, a2, a3, gd, g1, g2, g3)
					}
				}
			}
		}
	}
	// 90° lies inside bin 7 = [84°, 96°) for 15 bins of 12°.
	if !q.planar(7, 7, 0) || q.planar(7, 7, 1) || q.planar(6, 7, 0) {
		t.Errorf("planar bins %v", q.planarBin)
	}
}

func TestDistBin(t *testing.T) {
	q := newQuantizer(DefaultParams(), 2) // step 0.1 m, 21 bins
	for _, c := range []struct {
		dist   float64
		b, nbr int
	}{
		{0.01, 0, -1}, {0.07, 0, 1}, {0.12, 1, 0}, {0.18, 1, 2},
		{1.96, 19, 20}, {2.0, 20, 19}, {2.3, 20, 19},
	} {
		b, nb := q.distBin(c.dist)
		if b != c.b || nb != c.nbr {
			t.Errorf("distBin(%v) = %d, %d; want %d, %d", c.dist, b, nb, c.b, c.nbr)
		}
	}
}

func BenchmarkCosBin(b *testing.B) {
	q := newCosBins(15)
	cs := make([]float64, 1024)
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range cs {
		cs[i] = 2*rng.Float64() - 1
	}
	s := 0
	for i := 0; i < b.N; i++ {
		s += q.bin(cs[i&1023])
	}
	_ = s
}

func BenchmarkAcosBin(b *testing.B) {
	cs := make([]float64, 1024)
	rng := rand.New(rand.NewPCG(1, 1))
	for i := range cs {
		cs[i] = 2*rng.Float64() - 1
	}
	w := math.Pi / 15
	s := 0
	for i := 0; i < b.N; i++ {
		s += int(math.Acos(cs[i&1023]) / w)
	}
	_ = s
}
