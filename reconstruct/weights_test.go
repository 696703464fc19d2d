package reconstruct

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// TestAcos01 checks the Abramowitz & Stegun polynomial (eq. 4.4.46,
// stated error ≤ 2·10⁻⁸) against the Go standard library's math.Acos.
func TestAcos01(t *testing.T) {
	worst := 0.0
	for i := 0; i <= 100000; i++ {
		x := float64(i) / 100000
		worst = math.Max(worst, math.Abs(acos01(x)-math.Acos(x)))
	}
	// The handbook's bound, with a quarter more for its coefficients,
	// printed to ten decimals (measured: 2.2e-8 near x = 0).
	if worst > 2.5e-8 {
		t.Errorf("worst error %.3g rad, want ≤ 2e-8 (A&S 4.4.46)", worst)
	}
}

// referenceBands is the straightforward per-pixel form of
// MeasurementBands (vectors, normalisation, math.Acos), the oracle for
// the fast path.
func referenceBands(depth []float32, intr mesh.Intrinsics, opt WeightOptions) (wt, behind []float32, theta []float64) {
	w, h := intr.Width, intr.Height
	wt, behind, theta = make([]float32, w*h), make([]float32, w*h), make([]float64, w*h)
	ref := axialSigma(0.5, 0)
	at := func(x, y int) float64 { return float64(depth[y*w+x]) }
	for y := 1; y < h-1; y++ {
		for x := 1; x < w-1; x++ {
			i := y*w + x
			z := at(x, y)
			if !(z > 0) {
				continue
			}
			l, r, u, d := at(x-1, y), at(x+1, y), at(x, y-1), at(x, y+1)
			jump := opt.EdgeJump * z
			if !(l > 0 && r > 0 && u > 0 && d > 0) ||
				math.Abs(l-z) > jump || math.Abs(r-z) > jump || math.Abs(u-z) > jump || math.Abs(d-z) > jump {
				continue
			}
			// Differences NormalSpan pixels either side where they stay on
			// the surface, adjacent ones otherwise.
			k := opt.NormalSpan
			xl, xr, yu, yd := x-1, x+1, y-1, y+1
			if k > 1 && x >= k && y >= k && x < w-k && y < h-k {
				l2, r2, u2, d2 := at(x-k, y), at(x+k, y), at(x, y-k), at(x, y+k)
				far := jump * float64(k)
				if l2 > 0 && r2 > 0 && u2 > 0 && d2 > 0 &&
					math.Abs(l2-z) <= far && math.Abs(r2-z) <= far && math.Abs(u2-z) <= far && math.Abs(d2-z) <= far {
					l, r, u, d = l2, r2, u2, d2
					xl, xr, yu, yd = x-k, x+k, y-k, y+k
				}
			}
			px := r3.Sub(intr.BackProject(float64(xr), float64(y), r), intr.BackProject(float64(xl), float64(y), l))
			py := r3.Sub(intr.BackProject(float64(x), float64(yd), d), intr.BackProject(float64(x), float64(yu), u))
			n := mesh.Normalize(r3.Cross(px, py))
			ray := mesh.Normalize(intr.Ray(float64(x), float64(y)))
			c := math.Abs(r3.Dot(n, ray))
			th := math.Acos(math.Min(1, c))
			theta[i] = th
			if th > opt.MaxAngle {
				continue
			}
			s := axialSigma(z, th)
			wt[i] = float32(ref * ref / (s * s))
			band := math.Max(opt.BehindSigmas*axialSigma(z, 0), opt.BehindMin)
			floor := opt.BehindCos
			if floor == 0 {
				floor = 0.7
			}
			behind[i] = float32(band / math.Max(c, floor))
		}
	}
	return wt, behind, theta
}

// bumpyDepth is a tilted plane with ripples, holes and a step, so that
// every branch of the weighting is taken: valid pixels at many angles,
// missing neighbours, depth jumps, grazing pixels.
func bumpyDepth(intr mesh.Intrinsics, seed uint64) []float32 {
	rng := rand.New(rand.NewPCG(seed, 1))
	depth := make([]float32, intr.Width*intr.Height)
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			u, v := float64(x)/float64(intr.Width), float64(y)/float64(intr.Height)
			z := 0.45 + 0.3*v + 0.02*math.Sin(25*u)*math.Cos(9*v) + 0.0005*rng.NormFloat64()
			if u > 0.6 {
				z -= 0.08 // a step: depth jumps at its edge
			}
			if u > 0.8 {
				z += 0.5 * (u - 0.8) * float64(intr.Width) / 40 // steep: grazing
			}
			if rng.Float64() < 0.03 {
				z = 0 // dropouts
			}
			depth[y*intr.Width+x] = float32(z)
		}
	}
	return depth
}

// TestMeasurementBandsAgainstReference compares the fast weights and
// bands with the reference form on seeded random depth. Tolerance: the
// polynomial arccos errs by ≤ 2·10⁻⁸ rad; through the grazing term of
// σ_z, whose logarithmic derivative is 2/θ + 2/(π/2 − θ) ≤ 10 up to 75°,
// that moves σ_z² by a relative 4·10⁻⁷; float32 storage adds 6·10⁻⁸. So
// 1e-6 relative. Pixels within 1e-6 rad of MaxAngle may fall either side
// of the cut and are not compared.
func TestMeasurementBandsAgainstReference(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	opt := DefaultWeightOptions()
	opt.BehindMin = 0.0035
	for seed := uint64(1); seed <= 4; seed++ {
		if seed == 4 {
			opt.BehindCos = math.Cos(opt.MaxAngle) // the handheld scene volume's bands
		}
		depth := bumpyDepth(intr, seed)
		wantW, wantB, theta := referenceBands(depth, intr, opt)
		gotW, gotB := MeasurementBands(depth, intr, opt, nil, nil, true)
		valid, zeros := 0, 0
		for i := range depth {
			if math.Abs(theta[i]-opt.MaxAngle) < 1e-6 {
				continue
			}
			if wantW[i] == 0 {
				zeros++
				if gotW[i] != 0 || gotB[i] != 0 {
					t.Fatalf("seed %d pixel %d: got weight %g band %g, want 0", seed, i, gotW[i], gotB[i])
				}
				continue
			}
			valid++
			if e := math.Abs(float64(gotW[i]-wantW[i])) / float64(wantW[i]); e > 1e-6 {
				t.Fatalf("seed %d pixel %d: weight %g, want %g (rel. error %.2g)", seed, i, gotW[i], wantW[i], e)
			}
			if e := math.Abs(float64(gotB[i]-wantB[i])) / float64(wantB[i]); e > 1e-6 {
				t.Fatalf("seed %d pixel %d: band %g, want %g (rel. error %.2g)", seed, i, gotB[i], wantB[i], e)
			}
		}
		// The image must exercise both outcomes.
		if valid < len(depth)/3 || zeros < len(depth)/10 {
			t.Fatalf("seed %d: %d weighted and %d zero pixels of %d; the test image lost its variety", seed, valid, zeros, len(depth))
		}
	}
}

// TestMeasurementWeightsTiltedPlane checks weights on an exact plane
// against the noise model evaluated at the true incidence angle: for a
// plane n·X = c every pixel's θ follows from its ray, and the weight is
// (σ_z(0.5, 0)/σ_z(z, θ))² (Nguyen, Izadi & Lovell 2012). Central
// differences of an exact plane give its exact normal up to float32
// depth rounding (relative 6·10⁻⁸ over a baseline of two pixels, ~10⁻⁴
// rad at worst), which moves the weight by < 0.1%.
func TestMeasurementWeightsTiltedPlane(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	n := mesh.Normalize(r3.Vec{Y: -math.Sin(0.5), Z: -math.Cos(0.5)}) // tilted 0.5 rad about x, facing the camera
	const c = -0.5
	depth := make([]float32, intr.Width*intr.Height)
	for y := 0; y < intr.Height; y++ {
		for x := 0; x < intr.Width; x++ {
			ray := intr.Ray(float64(x), float64(y))
			depth[y*intr.Width+x] = float32(c / r3.Dot(n, ray))
		}
	}
	got := MeasurementWeights(depth, intr, DefaultWeightOptions(), nil)
	ref := axialSigma(0.5, 0)
	for y := 1; y < intr.Height-1; y++ {
		for x := 1; x < intr.Width-1; x++ {
			i := y*intr.Width + x
			ray := mesh.Normalize(intr.Ray(float64(x), float64(y)))
			theta := math.Acos(math.Abs(r3.Dot(n, ray)))
			s := axialSigma(float64(depth[i]), theta)
			want := ref * ref / (s * s)
			if e := math.Abs(float64(got[i])-want) / want; e > 1e-3 {
				t.Fatalf("pixel (%d, %d): weight %g, want %g at θ = %.1f°", x, y, got[i], want, theta*180/math.Pi)
			}
		}
	}
	// Worked value (Nguyen et al. 2012): σ_z(0.5 m, 0) ≈ 1.2 mm, so a
	// face-on measurement at 0.5 m weighs exactly 1.
	if s := axialSigma(0.5, 0); math.Abs(s-0.00122) > 0.00001 {
		t.Errorf("σ_z(0.5, 0) = %.5f m, want ≈ 0.0012", s)
	}
}

// TestMeasurementBandsWorkers checks that the number of goroutines does
// not change a bit of the output.
func TestMeasurementBandsWorkers(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	depth := bumpyDepth(intr, 7)
	o1 := DefaultWeightOptions()
	o1.Workers = 1
	o3 := o1
	o3.Workers = 3
	w1, b1 := MeasurementBands(depth, intr, o1, nil, nil, true)
	w3, b3 := MeasurementBands(depth, intr, o3, nil, nil, true)
	for i := range w1 {
		if w1[i] != w3[i] || b1[i] != b3[i] {
			t.Fatalf("pixel %d differs between 1 and 3 workers", i)
		}
	}
}

// TestMeasurementBandsMaxDepth checks WeightOptions.MaxDepth: pixels
// deeper than it weigh 0 with no band, the others exactly as without it.
func TestMeasurementBandsMaxDepth(t *testing.T) {
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131, Fy: 131, Cx: 79.5, Cy: 59.5}
	depth := bumpyDepth(intr, 7)
	o := DefaultWeightOptions()
	w0, b0 := MeasurementBands(depth, intr, o, nil, nil, true)
	s := slices.Clone(depth)
	slices.Sort(s)
	o.MaxDepth = float64(s[len(s)/2]) // half the pixels beyond
	w, b := MeasurementBands(depth, intr, o, nil, nil, true)
	beyond, kept := 0, 0
	for i, z := range depth {
		switch {
		case float64(z) > o.MaxDepth:
			if w[i] != 0 || b[i] != 0 {
				t.Fatalf("pixel %d at %v m beyond %v: weight %v, band %v", i, z, o.MaxDepth, w[i], b[i])
			}
			beyond++
		case w[i] != w0[i] || b[i] != b0[i]:
			t.Fatalf("pixel %d at %v m: weight %v, band %v; without MaxDepth %v, %v", i, z, w[i], b[i], w0[i], b0[i])
		case w[i] > 0:
			kept++
		}
	}
	if beyond == 0 || kept == 0 {
		t.Fatalf("%d pixels beyond, %d weighed within: the test needs both", beyond, kept)
	}
}
