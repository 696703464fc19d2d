package reconstruct

import (
	"errors"
	"image"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// plateScene renders a flat textured plate analytically: every pixel's
// ray is intersected with the plate's plane (x = t·ray, t = n·P0/n·ray,
// the textbook ray–plane intersection), and the colour is the texture
// at the plate-fixed point that the turn by angle about the axis point
// axis (plate coordinates, metres from P0) brought under that pixel.
// The renderer and the truth are closed-form, independent of the code
// under test.
type plateScene struct {
	intr    mesh.Intrinsics
	p0, up  r3.Vec
	bu, bv  r3.Vec // plate basis, bu × bv = up
	radius  float64
	axis    [2]float64
	texture func(x, y float64) float64
	gain    func(view int) (scale, offset float64)
	noise   float64
	rng     *rand.Rand
}

func newPlateScene() *plateScene {
	up := mesh.Normalize(r3.Vec{Y: -math.Cos(math.Pi / 6), Z: -math.Sin(math.Pi / 6)})
	bu := r3.Vec{X: 1}
	bv := r3.Cross(up, bu)
	return &plateScene{
		intr: mesh.DefaultIntrinsics(), p0: r3.Vec{Z: 0.55}, up: up, bu: bu, bv: bv, radius: 0.14,
		axis: [2]float64{0.004, -0.003},
		texture: func(x, y float64) float64 {
			return 110 + 50*math.Sin(2*math.Pi*x/0.013)*math.Cos(2*math.Pi*y/0.017) + 30*math.Sin(2*math.Pi*(x+2*y)/0.029)
		},
		gain: func(int) (float64, float64) { return 1, 0 },
	}
}

func (s *plateScene) view(k int, angle float64) PlateView {
	w, h := s.intr.Width, s.intr.Height
	depth := make([]float32, w*h)
	img := image.NewNRGBA(image.Rect(0, 0, w, h))
	c, sn := math.Cos(angle), math.Sin(angle)
	scale, off := s.gain(k)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			ray := s.intr.Ray(float64(x), float64(y))
			t := r3.Dot(s.up, s.p0) / r3.Dot(s.up, ray)
			v := 30.0 // background
			if t > 0 {
				p := r3.Scale(t, ray)
				d := r3.Sub(p, s.p0)
				qx, qy := r3.Dot(d, s.bu), r3.Dot(d, s.bv)
				if math.Hypot(qx, qy) <= s.radius {
					depth[y*w+x] = float32(p.Z)
					// Undo the turn: R⁻¹(q − a) + a.
					ax, ay := qx-s.axis[0], qy-s.axis[1]
					v = s.texture(c*ax+sn*ay+s.axis[0], -sn*ax+c*ay+s.axis[1])
				}
			}
			v = v*scale + off
			if s.noise > 0 {
				v += s.noise * s.rng.NormFloat64()
			}
			g := uint8(math.Max(0, math.Min(255, math.Round(v))))
			o := img.PixOffset(x, y)
			img.Pix[o], img.Pix[o+1], img.Pix[o+2], img.Pix[o+3] = g, g, g, 255
		}
	}
	return PlateView{Depth: depth, Color: img, Intr: s.intr, Angle: angle}
}

func (s *plateScene) views(n int) []PlateView {
	out := make([]PlateView, n)
	for k := range out {
		out[k] = s.view(k, 2*math.Pi*float64(k)/float64(n))
	}
	return out
}

func (s *plateScene) plane() Plane { return Plane{Normal: s.up, Offset: -r3.Dot(s.up, s.p0)} }

// TestEstimateAxisFromPlate: an axis 5 mm off the plate's centre (a
// plate need not turn about its centre), found from the plate's
// texture alone, with per-view gain and offset changes (which the
// normalised correlation ignores) and 8-bit colour noise of σ = 2.
// Tolerance: 0.1 mm, a tenth of the 1 mm cell; the texture's shortest
// wavelength (13 mm) makes bilinear resampling nearly exact, so the
// error left is the colour noise and 8-bit rounding averaged over
// about 10⁵ cells a view.
func TestEstimateAxisFromPlate(t *testing.T) {
	s := newPlateScene()
	s.gain = func(k int) (float64, float64) { return 1 + 0.05*float64(k%3-1), 4 * float64(k%2) }
	s.noise = 2
	s.rng = rand.New(rand.NewPCG(3, 4))
	views := s.views(8)
	fit, err := EstimateAxisFromPlate(s.plane(), s.p0, s.radius, views, DefaultPlateAxisOptions())
	if err != nil {
		t.Fatal(err)
	}
	want := r3.Add(s.p0, r3.Add(r3.Scale(s.axis[0], s.bu), r3.Scale(s.axis[1], s.bv)))
	if d := r3.Norm(r3.Sub(fit.Point, want)); d > 1e-4 {
		t.Errorf("axis point %v, want %v: %.3f mm off", fit.Point, want, d*1000)
	}
	if fit.Correlation < 0.9 {
		t.Errorf("correlation %.3f at the estimate, want ≥ 0.9 on a clean texture", fit.Correlation)
	}
	t.Logf("off by %.4f mm, correlation %.3f, %d cells, %d evaluations", r3.Norm(r3.Sub(fit.Point, want))*1000, fit.Correlation, fit.Cells, fit.Evaluations)
}

// TestEstimateAxisFromPlateWeakTexture: a plain plate with sensor
// noise only cannot place the axis and must say so, not guess.
func TestEstimateAxisFromPlateWeakTexture(t *testing.T) {
	s := newPlateScene()
	s.texture = func(x, y float64) float64 { return 60 }
	s.noise = 2
	s.rng = rand.New(rand.NewPCG(5, 6))
	_, err := EstimateAxisFromPlate(s.plane(), s.p0, s.radius, s.views(4), DefaultPlateAxisOptions())
	if !errors.Is(err, ErrWeakTexture) {
		t.Fatalf("plain plate: got %v, want ErrWeakTexture", err)
	}
}

// TestEstimateAxisFromPlateBadInput: mismatched images and degenerate
// options are errors, not panics.
func TestEstimateAxisFromPlateBadInput(t *testing.T) {
	s := newPlateScene()
	v := s.views(2)
	short := v[1]
	short.Depth = short.Depth[:10]
	for name, tc := range map[string]struct {
		views  []PlateView
		radius float64
		opt    PlateAxisOptions
	}{
		"one view":    {v[:1], s.radius, DefaultPlateAxisOptions()},
		"short depth": {[]PlateView{v[0], short}, s.radius, DefaultPlateAxisOptions()},
		"zero radius": {v, 0, DefaultPlateAxisOptions()},
		"zero cell":   {v, s.radius, PlateAxisOptions{Range: 0.006, Step: 1e-5, Band: 0.004}},
		"huge plate":  {v, 10, DefaultPlateAxisOptions()},
	} {
		if _, err := EstimateAxisFromPlate(s.plane(), s.p0, tc.radius, tc.views, tc.opt); err == nil {
			t.Errorf("%s: no error", name)
		}
	}
}

// BenchmarkEstimateAxisFromPlate: the plate-texture axis search over
// eight 640×480 views of a 0.28 m plate (1 mm cells).
func BenchmarkEstimateAxisFromPlate(b *testing.B) {
	s := newPlateScene()
	views := s.views(8)
	b.ResetTimer()
	for b.Loop() {
		if _, err := EstimateAxisFromPlate(s.plane(), s.p0, s.radius, views, DefaultPlateAxisOptions()); err != nil {
			b.Fatal(err)
		}
	}
}
