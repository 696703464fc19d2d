package render

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"
	"gonum.org/v1/gonum/stat"

	"github.com/scanfold/scanfold/mesh"
)

// TestAxialSigmaWorkedValues checks the formulas against the worked
// values of Nguyen, Izadi & Lovell (2012, 3DIMPVT): σ_z ≈ 1.2 mm at
// 0.5 m and ≈ 1.9 mm at 1 m face-on (values quoted to 0.1 mm, so
// ±0.05 mm), σ_L = 0.8 px face-on; and against hand evaluations of the
// published expressions at oblique angles.
func TestAxialSigmaWorkedValues(t *testing.T) {
	for _, tc := range []struct{ z, want float64 }{{0.5, 0.0012}, {1, 0.0019}} {
		if got := AxialSigma(tc.z, 0); math.Abs(got-tc.want) > 0.05e-3 {
			t.Errorf("AxialSigma(%v, 0) = %v, want ≈ %v", tc.z, got, tc.want)
		}
	}
	// Hand evaluation at z = 1 m, θ = π/4: θ/(π/2 − θ) = 1, so
	// σ_z = 0.0012 + 0.0019·0.36 + 0.0001 = 0.001984 m and
	// σ_L = 0.8 + 0.035 = 0.835 px.
	if got := AxialSigma(1, math.Pi/4); math.Abs(got-0.001984) > 1e-12 {
		t.Errorf("AxialSigma(1, π/4) = %v, want 0.001984", got)
	}
	if got := LateralSigmaPixels(math.Pi / 4); math.Abs(got-0.835) > 1e-12 {
		t.Errorf("LateralSigmaPixels(π/4) = %v, want 0.835", got)
	}
	if got := LateralSigmaPixels(0); got != 0.8 {
		t.Errorf("LateralSigmaPixels(0) = %v, want 0.8", got)
	}
	if !math.IsInf(AxialSigma(1, math.Pi/2), 1) || !math.IsInf(LateralSigmaPixels(2), 1) || !math.IsNaN(AxialSigma(0, 0)) {
		t.Error("AxialSigma/LateralSigmaPixels edge cases")
	}
}

// planeFrame renders a fronto-parallel plane filling the whole image at
// depth z.
func planeFrame(t testing.TB, k mesh.Intrinsics, z float64) *Frame {
	t.Helper()
	hx := 1.2 * z * math.Max(k.Cx+1, float64(k.Width)-k.Cx) / k.Fx
	hy := 1.2 * z * math.Max(k.Cy+1, float64(k.Height)-k.Cy) / k.Fy
	f, err := Render(k, []Object{{Mesh: quadMesh(hx, hy), ModelToCam: translate(0, 0, z), Color: mesh.RGB{R: 128, G: 128, B: 128}}}, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// viewAngle returns the angle between pixel (i, j)'s ray and the normal
// of a fronto-parallel plane.
func viewAngle(k mesh.Intrinsics, i, j int) float64 {
	d := k.Ray(float64(i), float64(j))
	return math.Acos(1 / r3.Norm(d))
}

// TestAxialNoiseStatistics renders a plane face-on at several distances,
// applies the default noise model, and checks the empirical spread of
// depth against AxialSigma (Nguyen, Izadi & Lovell 2012).
//
// Over the whole image the residuals divided by AxialSigma(z, θ) of
// their pixel must have standard deviation 1 and mean 0. The sampling
// error of a standard-deviation estimate from n normal samples is
// σ/√(2n) and that of a mean σ/√n; we accept 5 of those (a 5-sigma
// band, so a correct model fails with probability below 1e−6). Lateral
// resampling does not change a fronto-parallel plane's depth, and the
// neighbour's θ differs from the pixel's by ~0.002 rad, which changes σ
// by < 0.1 % of the band. A 64×64 window at the image centre is also
// checked directly against AxialSigma(z, 0) (θ ≤ 0.09 rad there changes
// σ by < 0.01 %).
func TestAxialNoiseStatistics(t *testing.T) {
	k := mesh.DefaultIntrinsics()
	s, err := NewSensor(DefaultNoiseOptions())
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(42, 1))
	dst := &Frame{}
	for _, z := range []float64{0.5, 0.7, 1.0, 1.5} {
		clean := planeFrame(t, k, z)
		if err := s.Apply(dst, clean, rng); err != nil {
			t.Fatal(err)
		}
		var res, win []float64
		for j := 0; j < k.Height; j++ {
			for i := 0; i < k.Width; i++ {
				got := float64(dst.Depth[j*k.Width+i])
				if got == 0 {
					continue
				}
				res = append(res, (got-z)/AxialSigma(z, viewAngle(k, i, j)))
				if math.Abs(float64(i)-k.Cx) < 32 && math.Abs(float64(j)-k.Cy) < 32 {
					win = append(win, got)
				}
			}
		}
		n := float64(len(res))
		if n < 0.9*float64(k.Width*k.Height) {
			t.Fatalf("z=%v: only %v of %d pixels kept", z, n, k.Width*k.Height)
		}
		mean, std := stat.MeanStdDev(res, nil)
		if math.Abs(std-1) > 5/math.Sqrt(2*n) || math.Abs(mean) > 5/math.Sqrt(n) {
			t.Errorf("z=%v: normalised residual mean %.4f std %.4f over %v pixels, want 0 and 1 within 5 standard errors", z, mean, std, n)
		}
		want := AxialSigma(z, 0)
		wm, ws := stat.MeanStdDev(win, nil)
		nw := float64(len(win))
		if math.Abs(ws-want) > 5*want/math.Sqrt(2*nw) || math.Abs(wm-z) > 5*want/math.Sqrt(nw) {
			t.Errorf("z=%v: centre window mean %.6f std %.4f mm, want %v and %.4f mm", z, wm, ws*1e3, z, want*1e3)
		}
		t.Logf("z=%v m: σ centre %.3f mm (model %.3f mm), normalised std %.4f over %v pixels", z, ws*1e3, want*1e3, std, n)
	}
}

// normalCDF is the standard normal distribution function, through the Go
// standard library's math.Erfc.
func normalCDF(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }

// TestLateralNoiseEdgeSpread checks the lateral model on a vertical
// depth edge. The plane covers columns u ≥ 320 (its edge projects to
// u = 319.5, between columns). A pixel in column c takes the depth of
// column round(c + σ·N(0, 1)), so an empty pixel (σ = σ_L(0) = 0.8 px,
// Nguyen et al. 2012) gains depth with probability 1 − Φ((319.5 − c)/σ),
// and a covered pixel (θ ≤ 0.002 rad near the edge, σ within 0.0001 px
// of 0.8) loses it with probability Φ((319.5 − c)/σ), Φ the normal
// distribution function. The empirical rates over n pixels must be within
// 5 binomial standard errors √(p(1 − p)/n).
func TestLateralNoiseEdgeSpread(t *testing.T) {
	// A tall image with a long focal length in y keeps every ray within
	// 0.04 rad of the axis, so σ_L stays within 0.001 px of 0.8 (a shift
	// of the expected rates below 3e−4, small against the tolerance).
	k := mesh.Intrinsics{Width: 24, Height: 4000, Fx: 525, Fy: 50000, Cx: 11.5, Cy: 1999.5}
	// Edge at X = 0: u = Cx = 11.5, between columns 11 and 12.
	m := &mesh.Mesh{Vertices: []r3.Vec{{X: 0, Y: -5, Z: 1}, {X: 5, Y: -5, Z: 1}, {X: 5, Y: 5, Z: 1}, {X: 0, Y: 5, Z: 1}}, Faces: []mesh.Face{{0, 1, 2}, {0, 2, 3}}}
	clean, err := Render(k, []Object{{Mesh: m, ModelToCam: mesh.Identity()}}, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	opt := NoNoise()
	opt.LateralScale = 1
	s, err := NewSensor(opt)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	counts := make([]int, k.Width)
	rows := 0
	dst := &Frame{}
	for rep := 0; rep < 5; rep++ {
		if err := s.Apply(dst, clean, rng); err != nil {
			t.Fatal(err)
		}
		for j := 10; j < k.Height-10; j++ { // away from the top and bottom
			rows++
			for i := 0; i < k.Width; i++ {
				if dst.Depth[j*k.Width+i] > 0 {
					counts[i]++
				}
			}
		}
	}
	for c := 8; c <= 15; c++ {
		p := 1 - normalCDF((11.5-float64(c))/0.8)
		got := float64(counts[c]) / float64(rows)
		se := math.Sqrt(p * (1 - p) / float64(rows))
		if math.Abs(got-p) > 5*se+1e-12 {
			t.Errorf("column %d: depth present in %.4f of rows, want %.4f ± %.4f", c, got, p, 5*se)
		}
	}
}

// TestGrazingDropout checks the grazing-angle dropout ramp on planes
// turned about the y axis, seen by a narrow camera whose rays all lie
// within 3.9° of the axis (x' ≤ 80/1200, y' ≤ 60/1200): every pixel is
// kept at 50° (θ ≤ 54° < 70°), every pixel lost at 85° (θ ≥ 81° > 80°),
// and at 75° the number lost matches the ramp's per-pixel probabilities
// (θ from each pixel's ray and the plane normal) within 5 binomial
// standard errors.
func TestGrazingDropout(t *testing.T) {
	k := mesh.Intrinsics{Width: 160, Height: 120, Fx: 1200, Fy: 1200, Cx: 79.5, Cy: 59.5}
	opt := NoNoise()
	opt.GrazingStart, opt.GrazingMax = 70*math.Pi/180, 80*math.Pi/180
	rng := rand.New(rand.NewPCG(8, 9))
	for _, deg := range []float64{50, 75, 85} {
		pose := mesh.PoseFromAxisAngle(r3.Vec{Y: 1}, deg*math.Pi/180, r3.Vec{Z: 1})
		clean, err := Render(k, []Object{{Mesh: quadMesh(4, 4), ModelToCam: pose}}, DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		noisy, err := AddNoise(clean, opt, rng)
		if err != nil {
			t.Fatal(err)
		}
		nrm := pose.Rotate(r3.Vec{Z: -1})
		var seen, lost int
		var mean, vr float64
		for j := 0; j < k.Height; j++ {
			for i := 0; i < k.Width; i++ {
				p := j*k.Width + i
				if clean.Depth[p] == 0 {
					continue
				}
				seen++
				if noisy.Depth[p] == 0 {
					lost++
				}
				th := math.Acos(math.Abs(r3.Dot(mesh.Normalize(k.Ray(float64(i), float64(j))), nrm)))
				q := math.Min(1, math.Max(0, (th-opt.GrazingStart)/(opt.GrazingMax-opt.GrazingStart)))
				mean += q
				vr += q * (1 - q)
			}
		}
		if seen < 1000 {
			t.Fatalf("%v°: plane covers only %d pixels", deg, seen)
		}
		if math.Abs(float64(lost)-mean) > 5*math.Sqrt(vr)+0.5 {
			t.Errorf("%v°: %d of %d pixels lost, model expects %.1f ± %.1f", deg, lost, seen, mean, 5*math.Sqrt(vr))
		}
		switch deg {
		case 50:
			if lost != 0 {
				t.Errorf("50°: %d pixels lost", lost)
			}
		case 85:
			if lost != seen {
				t.Errorf("85°: %d of %d pixels kept", seen-lost, seen)
			}
		}
	}
}

// TestEdgeDropoutBand checks the discontinuity band with EdgeDropout = 1
// (so it is deterministic): a square in front of a far wall, with a jump
// of 0.3 m, loses exactly the pixels within EdgeBand of the step on both
// sides, and a step smaller than EdgeJump loses nothing.
func TestEdgeDropoutBand(t *testing.T) {
	k := mesh.Intrinsics{Width: 60, Height: 50, Fx: 60, Fy: 60, Cx: 29.5, Cy: 24.5}
	for _, tc := range []struct {
		wall float64
		band int
		lose bool
	}{{1.3, 1, true}, {1.3, 2, true}, {1.01, 2, false}} {
		// Square spans X, Y in [−0.2, 0.2] at z = 1: pixels 18..41 × 13..36
		// (u = 60·X + 29.5), whole pixels with edges between centres.
		objs := []Object{
			{Mesh: quadMesh(0.2, 0.2), ModelToCam: translate(0, 0, 1)},
			{Mesh: quadMesh(10, 10), ModelToCam: translate(0, 0, tc.wall)},
		}
		clean, err := Render(k, objs, DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		opt := NoNoise()
		opt.EdgeJump, opt.EdgeBand, opt.EdgeDropout = 0.02, tc.band, 1
		noisy, err := AddNoise(clean, opt, rand.New(rand.NewPCG(1, 1)))
		if err != nil {
			t.Fatal(err)
		}
		for j := 0; j < k.Height; j++ {
			for i := 0; i < k.Width; i++ {
				p := j*k.Width + i
				// Chebyshev distance to the nearest pixel 4-adjacent to the
				// step between columns 17|18 and 41|42 and rows 12|13 and
				// 36|37. Inside, that is the square's border ring; outside,
				// the ring of pixels sharing a side with the square, whose
				// corners are missing: a pixel dx columns and dy rows away
				// is max(dx−1, dy) from one side and max(dx, dy−1) from
				// the other.
				inside := i >= 18 && i <= 41 && j >= 13 && j <= 36
				var dist int
				if inside {
					dist = min(i-18, 41-i, j-13, 36-j)
				} else {
					dx := max(18-i, i-41, 0)
					dy := max(13-j, j-36, 0)
					dist = min(max(dx-1, dy), max(dx, dy-1))
				}
				wantLost := tc.lose && dist < tc.band
				if lost := noisy.Depth[p] == 0; lost != wantLost {
					t.Fatalf("wall %v band %d: pixel (%d,%d) at distance %d lost=%v, want %v", tc.wall, tc.band, i, j, dist, lost, wantLost)
				}
			}
		}
	}
}

// TestRangeAndRandomDropout checks the range limits and the rate of
// random dropouts (binomial, 5 standard errors).
func TestRangeAndRandomDropout(t *testing.T) {
	k := mesh.Intrinsics{Width: 200, Height: 150, Fx: 180, Fy: 180, Cx: 99.5, Cy: 74.5}
	opt := NoNoise()
	opt.MinRange, opt.MaxRange = 0.4, 4
	rng := rand.New(rand.NewPCG(2, 3))
	for _, tc := range []struct {
		z    float64
		kept bool
	}{{0.35, false}, {0.45, true}, {3.9, true}, {4.5, false}} {
		noisy, err := AddNoise(planeFrame(t, k, tc.z), opt, rng)
		if err != nil {
			t.Fatal(err)
		}
		for p, z := range noisy.Depth {
			if (z > 0) != tc.kept {
				t.Fatalf("plane at %v m: pixel %d depth %v, want kept=%v", tc.z, p, z, tc.kept)
			}
		}
	}
	opt = NoNoise()
	opt.RandomDropout = 0.05
	noisy, err := AddNoise(planeFrame(t, k, 1), opt, rng)
	if err != nil {
		t.Fatal(err)
	}
	lost := 0
	for _, z := range noisy.Depth {
		if z == 0 {
			lost++
		}
	}
	n := float64(len(noisy.Depth))
	if d := math.Abs(float64(lost) - 0.05*n); d > 5*math.Sqrt(n*0.05*0.95) {
		t.Errorf("random dropout: %d of %v lost, want %.0f ± %.0f", lost, n, 0.05*n, 5*math.Sqrt(n*0.05*0.95))
	}
}

// TestDisparityQuantisation checks that quantised depths lie on the
// disparity lattice z = bf/(m·step) and within half a step of the true
// depth: |Δz| ≤ z²·step/(2·bf) to first order (dz/dd = −z²/bf).
func TestDisparityQuantisation(t *testing.T) {
	k := mesh.Intrinsics{Width: 40, Height: 30, Fx: 40, Fy: 40, Cx: 19.5, Cy: 14.5}
	opt := NoNoise()
	opt.DisparityStep, opt.BaselineFocal = 1.0/8, 43.5
	for _, z := range []float64{0.5, 0.777, 1.3, 2.9} {
		noisy, err := AddNoise(planeFrame(t, k, z), opt, rand.New(rand.NewPCG(1, 2)))
		if err != nil {
			t.Fatal(err)
		}
		got := float64(noisy.Depth[15*k.Width+20])
		m := opt.BaselineFocal / got / opt.DisparityStep
		// float32 storage: relative error 6e−8 in z, so in m as well.
		if math.Abs(m-math.Round(m)) > 1e-7*m {
			t.Errorf("z=%v: quantised depth %v is off the lattice (m = %v)", z, got, m)
		}
		half := z * z * opt.DisparityStep / (2 * opt.BaselineFocal)
		if math.Abs(got-z) > half*1.01 {
			t.Errorf("z=%v: quantised to %v, more than half a step (%v) away", z, got, half)
		}
	}
}

// TestColorNoise checks the colour noise spread on a uniform grey frame.
// Rounding to 8 bits adds the variance 1/12 of a uniform quantisation
// error (Sheppard's correction), so the expected standard deviation is
// √(σ² + 1/12); the tolerance is 5 standard errors σ/√(2n).
func TestColorNoise(t *testing.T) {
	k := mesh.Intrinsics{Width: 100, Height: 100, Fx: 100, Fy: 100, Cx: 49.5, Cy: 49.5}
	clean := planeFrame(t, k, 1)
	for i := 0; i < len(clean.Color.Pix); i += 4 {
		clean.Color.Pix[i], clean.Color.Pix[i+1], clean.Color.Pix[i+2] = 128, 128, 128
	}
	opt := NoNoise()
	opt.ColorSigma = 3
	noisy, err := AddNoise(clean, opt, rand.New(rand.NewPCG(4, 4)))
	if err != nil {
		t.Fatal(err)
	}
	var v []float64
	for i := 0; i < len(noisy.Color.Pix); i += 4 {
		v = append(v, float64(noisy.Color.Pix[i]), float64(noisy.Color.Pix[i+1]), float64(noisy.Color.Pix[i+2]))
		if noisy.Color.Pix[i+3] != 255 {
			t.Fatal("alpha changed")
		}
	}
	mean, std := stat.MeanStdDev(v, nil)
	want := math.Sqrt(9 + 1.0/12)
	n := float64(len(v))
	if math.Abs(std-want) > 5*want/math.Sqrt(2*n) || math.Abs(mean-128) > 5*want/math.Sqrt(n) {
		t.Errorf("colour noise mean %.3f std %.3f, want 128 and %.3f", mean, std, want)
	}
}

// TestNoNoiseAndDeterminism checks that NoNoise copies the frame exactly,
// that the same seed gives the same noisy frame, and that another seed
// gives another.
func TestNoNoiseAndDeterminism(t *testing.T) {
	k := mesh.Intrinsics{Width: 80, Height: 60, Fx: 70, Fy: 70, Cx: 40, Cy: 30}
	clean, err := Render(k, randomScene(rand.New(rand.NewPCG(1, 1)), k, 2, 10), DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	same, err := AddNoise(clean, NoNoise(), rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		t.Fatal(err)
	}
	if !framesEqual(same, clean) {
		t.Fatal("NoNoise changed the frame")
	}
	a, _ := AddNoise(clean, DefaultNoiseOptions(), rand.New(rand.NewPCG(9, 9)))
	b, _ := AddNoise(clean, DefaultNoiseOptions(), rand.New(rand.NewPCG(9, 9)))
	c, _ := AddNoise(clean, DefaultNoiseOptions(), rand.New(rand.NewPCG(9, 10)))
	if !framesEqual(a, b) {
		t.Error("same seed gave different frames")
	}
	if framesEqual(a, c) {
		t.Error("different seeds gave the same frame")
	}
	// Ground-truth labels are kept from the clean frame.
	for p := range clean.Object {
		if a.Object[p] != clean.Object[p] || a.Triangle[p] != clean.Triangle[p] {
			t.Fatal("noise changed the labels")
		}
	}
}

// TestPerturbLighting checks the per-frame lighting changes: none with
// NoNoise; with defaults, log-gain has the configured spread (5 standard
// errors of a standard deviation estimate over 4000 draws) and the light
// direction keeps its length.
func TestPerturbLighting(t *testing.T) {
	opt := DefaultOptions()
	rng := rand.New(rand.NewPCG(6, 7))
	if got := PerturbLighting(opt, NoNoise(), rng); got != opt {
		t.Errorf("NoNoise changed the lighting: %+v", got)
	}
	n := DefaultNoiseOptions()
	var lg, turn []float64
	for i := 0; i < 4000; i++ {
		got := PerturbLighting(opt, n, rng)
		lg = append(lg, math.Log(got.Gain))
		if d := r3.Norm(got.LightDir) - r3.Norm(opt.LightDir); math.Abs(d) > 1e-12 {
			t.Fatalf("light direction length changed by %v", d)
		}
		turn = append(turn, math.Acos(math.Min(1, r3.Dot(mesh.Normalize(got.LightDir), mesh.Normalize(opt.LightDir)))))
	}
	_, std := stat.MeanStdDev(lg, nil)
	if math.Abs(std-n.GainSigma) > 5*n.GainSigma/math.Sqrt(2*4000) {
		t.Errorf("log-gain std %.4f, want %.4f", std, n.GainSigma)
	}
	// The light turns by at most the drawn angle, |N(0, LightJitter)|,
	// whose mean is LightJitter·√(2/π); a turn about a random axis moves
	// the direction by less, so the mean turn must be positive and below.
	if m := stat.Mean(turn, nil); !(m > 0) || m > n.LightJitter*math.Sqrt(2/math.Pi) {
		t.Errorf("mean light turn %.4f rad, want in (0, %.4f]", m, n.LightJitter*math.Sqrt(2/math.Pi))
	}
}

func TestNoiseErrors(t *testing.T) {
	for _, tc := range []struct {
		mod  func(*NoiseOptions)
		want string
	}{
		{func(o *NoiseOptions) { o.AxialScale = -1 }, "AxialScale"},
		{func(o *NoiseOptions) { o.GrazingStart = 1.2; o.GrazingMax = 1 }, "GrazingStart"},
		{func(o *NoiseOptions) { o.GrazingMax = 2 }, "GrazingMax"},
		{func(o *NoiseOptions) { o.EdgeBand = 100 }, "EdgeBand"},
		{func(o *NoiseOptions) { o.RandomDropout = 1.5 }, "RandomDropout"},
		{func(o *NoiseOptions) { o.MinRange = 5 }, "MinRange"},
		{func(o *NoiseOptions) { o.ColorSigma = math.NaN() }, "ColorSigma"},
		{func(o *NoiseOptions) { o.DisparityStep = 0.1; o.BaselineFocal = 0 }, "BaselineFocal"},
	} {
		o := DefaultNoiseOptions()
		tc.mod(&o)
		if _, err := NewSensor(o); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("error %v, want one naming %s", err, tc.want)
		}
	}
	s, _ := NewSensor(DefaultNoiseOptions())
	k := mesh.Intrinsics{Width: 8, Height: 8, Fx: 8, Fy: 8, Cx: 3.5, Cy: 3.5}
	f, _ := NewFrame(k)
	rng := rand.New(rand.NewPCG(1, 1))
	if err := s.Apply(f, f, rng); err == nil {
		t.Error("dst == src accepted")
	}
	if err := s.Apply(&Frame{}, f, nil); err == nil {
		t.Error("nil rng accepted")
	}
	bad := f.Clone()
	bad.Depth = bad.Depth[:10]
	if err := s.Apply(&Frame{}, bad, rng); err == nil || !strings.Contains(err.Error(), "depth values") {
		t.Errorf("short depth: %v", err)
	}
}

// TestNoiseWithoutNormals checks that a frame with depth but no normals
// (built from a depth image) is treated as face-on: no grazing dropouts.
func TestNoiseWithoutNormals(t *testing.T) {
	k := mesh.Intrinsics{Width: 40, Height: 30, Fx: 40, Fy: 40, Cx: 19.5, Cy: 14.5}
	f := planeFrame(t, k, 1)
	clear(f.Normal)
	opt := NoNoise()
	opt.GrazingStart, opt.GrazingMax = 1, 1.2
	noisy, err := AddNoise(f, opt, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		t.Fatal(err)
	}
	for p, z := range noisy.Depth {
		if z != f.Depth[p] {
			t.Fatalf("pixel %d: depth %v, want %v", p, z, f.Depth[p])
		}
	}
}
