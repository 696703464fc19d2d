package validate

import (
	"image"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/scanfold/scanfold/mesh"
)

// Handbook values of Smith's hexcone transform (Smith 1978, SIGGRAPH,
// DOI 10.1145/800248.807361; the worked values as listed in the
// project's REFERENCES.md). Tolerance: float32 rounding of values ≤ 360,
// ~3e-5, and for 128/255 = 0.50196 the stated three decimals.
func TestHSVHandbook(t *testing.T) {
	for _, c := range []struct {
		in      mesh.RGB
		h, s, v float64
		vTol    float64
	}{
		{mesh.RGB{R: 255}, 0, 1, 1, 1e-6},
		{mesh.RGB{G: 255}, 120, 1, 1, 1e-6},
		{mesh.RGB{B: 255}, 240, 1, 1, 1e-6},
		{mesh.RGB{R: 128, G: 128, B: 128}, 0, 0, 0.502, 5e-4}, // H undefined: reported as 0
		{mesh.RGB{R: 255, G: 255}, 60, 1, 1, 1e-6},            // yellow, between the R and G sectors
		{mesh.RGB{R: 255, B: 255}, 300, 1, 1, 1e-6},           // magenta
		{mesh.RGB{}, 0, 0, 0, 0},                              // black: S = 0 by definition when max = 0
		// (255, 128, 0): R largest, H = 60·(128 − 0)/255 = 30.118°,
		// S = 1, V = 1.
		{mesh.RGB{R: 255, G: 128}, 60 * 128.0 / 255, 1, 1, 1e-6},
		// (51, 102, 204): B largest, H = 60·(4 + (51 − 102)/153) = 220°,
		// S = 153/204 = 0.75, V = 0.8.
		{mesh.RGB{R: 51, G: 102, B: 204}, 220, 0.75, 0.8, 1e-6},
	} {
		got := HSVFromRGB(c.in)
		if !near(float64(got.H), c.h, 3e-5) || !near(float64(got.S), c.s, 1e-6) || !near(float64(got.V), c.v, c.vTol) {
			t.Errorf("HSVFromRGB(%v) = %+v, want (%v, %v, %v)", c.in, got, c.h, c.s, c.v)
		}
	}
}

// RGB → HSV → RGB is the identity on 8-bit colours (every third level of
// each channel: 86³ colours): the inverse sectors of Smith (1978) undo
// the forward transform up to float32 rounding, far below half a level.
func TestHSVRoundTripRGB(t *testing.T) {
	for r := 0; r < 256; r += 3 {
		for g := 0; g < 256; g += 3 {
			for b := 0; b < 256; b += 3 {
				c := mesh.RGB{R: uint8(r), G: uint8(g), B: uint8(b)}
				if back := HSVFromRGB(c).RGB(); back != c {
					t.Fatalf("%v → %+v → %v", c, HSVFromRGB(c), back)
				}
			}
		}
	}
}

// HSV → RGB → HSV returns the colour up to the 8-bit quantisation of
// RGB. Each channel moves by at most 0.5/255, so V moves by ≤ 0.5/255,
// S = (max − min)/max by ≤ (1/255)/V·(1 + S), and H = 60°·a/b with
// |a| ≤ b = max − min = S·V by ≤ 60°·2·(1/255)/(S·V − 1/255).
func TestHSVRoundTripHSV(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for i := 0; i < 20000; i++ {
		in := HSV{H: float32(rng.Float64() * 360), S: float32(rng.Float64()), V: float32(rng.Float64())}
		out := HSVFromRGB(in.RGB())
		s, v := float64(in.S), float64(in.V)
		if !near(float64(out.V), v, 0.5/255+1e-6) {
			t.Fatalf("%+v → %+v: V off", in, out)
		}
		if v > 0.05 && !near(float64(out.S), s, (1/255.0)/v*(1+s)+1e-6) {
			t.Fatalf("%+v → %+v: S off", in, out)
		}
		if sv := s * v; sv > 0.05 {
			tol := 60*2*(1/255.0)/(sv-1/255.0) + 1e-4
			if d := HueDifference(float64(out.H), float64(in.H)); d > tol {
				t.Fatalf("%+v → %+v: H off by %v°, tolerance %v°", in, out, d, tol)
			}
		}
	}
}

func TestHueDifferenceWraps(t *testing.T) {
	for _, c := range []struct{ a, b, want float64 }{
		{350, 10, 20}, {10, 350, 20}, {0, 180, 180}, {90, 270, 180}, {0, 359, 1}, {720, 0, 0}, {-30, 30, 60},
	} {
		if got := HueDifference(c.a, c.b); !near(got, c.want, 1e-12) {
			t.Errorf("HueDifference(%v, %v) = %v, want %v", c.a, c.b, got, c.want)
		}
	}
}

// Without the dark-pixel damping, ColorDistance is the Euclidean
// distance between the points (√w_c·S·cos H, √w_c·S·sin H, √w_v·V):
// the law of cosines turns |S₁e^{iH₁} − S₂e^{iH₂}|² into
// (S₁ − S₂)² + 4S₁S₂sin²(ΔH/2). Checked on random pairs; tolerance
// float32 inputs, ~1e-6.
func TestColorDistanceIsEuclidean(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	w := ColorWeights{Chroma: 1, Value: 0.25}
	embed := func(c HSV) [3]float64 {
		h := float64(c.H) * math.Pi / 180
		return [3]float64{float64(c.S) * math.Cos(h), float64(c.S) * math.Sin(h), 0.5 * float64(c.V)}
	}
	for i := 0; i < 1000; i++ {
		a := HSV{H: float32(rng.Float64() * 360), S: float32(rng.Float64()), V: float32(rng.Float64())}
		b := HSV{H: float32(rng.Float64() * 360), S: float32(rng.Float64()), V: float32(rng.Float64())}
		ea, eb := embed(a), embed(b)
		want := math.Sqrt((ea[0]-eb[0])*(ea[0]-eb[0]) + (ea[1]-eb[1])*(ea[1]-eb[1]) + (ea[2]-eb[2])*(ea[2]-eb[2]))
		if got := ColorDistance(a, b, w); !near(got, want, 1e-6) {
			t.Fatalf("ColorDistance(%+v, %+v) = %v, embedding gives %v", a, b, got, want)
		}
	}
	// Greys carry no hue: two greys of the same value are 0 apart
	// whatever their (undefined) hue fields say.
	if d := ColorDistance(HSV{H: 10, V: 0.5}, HSV{H: 200, V: 0.5}, DefaultColorWeights()); d != 0 {
		t.Errorf("greys with different hue fields: distance %v, want 0", d)
	}
	// Opposite fully saturated hues at equal value: 2.
	if d := ColorDistance(HSV{H: 0, S: 1, V: 1}, HSV{H: 180, S: 1, V: 1}, DefaultColorWeights()); !near(d, 2, 1e-6) {
		t.Errorf("opposite hues: %v, want 2", d)
	}
	// Dark pixels: at V = 0.06 (half of Dark) the chroma term is halved.
	dw := DefaultColorWeights()
	d := ColorDistance(HSV{H: 0, S: 1, V: 0.06}, HSV{H: 180, S: 1, V: 0.06}, dw)
	if !near(d, math.Sqrt(4*0.5), 1e-6) {
		t.Errorf("dark opposite hues: %v, want √2", d)
	}
}

func TestHSVImage(t *testing.T) {
	img := image.NewNRGBA(image.Rect(0, 0, 3, 2))
	img.Pix[4*4+0] = 255 // pixel (1, 1): red
	img.Pix[4*4+3] = 255
	hs := HSVImage(img.Pix, img.Stride, 3, 2, nil)
	if len(hs) != 6 || hs[4] != (HSV{H: 0, S: 1, V: 1}) || hs[0] != (HSV{}) {
		t.Errorf("HSVImage: %+v", hs)
	}
}

func BenchmarkHSVImage640x480(b *testing.B) {
	img := image.NewNRGBA(image.Rect(0, 0, 640, 480))
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range img.Pix {
		img.Pix[i] = uint8(rng.IntN(256))
	}
	var dst []HSV
	b.ReportAllocs()
	for b.Loop() {
		dst = HSVImage(img.Pix, img.Stride, 640, 480, dst)
	}
}
