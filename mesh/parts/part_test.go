package parts

import (
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

func TestNamesAndGet(t *testing.T) {
	want := []string{"bracket", "bushing", "nut", "valve", "labelbox"}
	if got := Names(); !reflect.DeepEqual(got, want) {
		t.Fatalf("Names() = %v, want %v", got, want)
	}
	for _, name := range want {
		p, err := Get(name)
		if err != nil {
			t.Fatalf("Get(%q): %v", name, err)
		}
		if p.Name != name || p.Description == "" || p.SDF == nil || p.Color == nil {
			t.Errorf("Get(%q) = incomplete part %+v", name, p)
		}
	}
	_, err := Get("sprocket")
	if err == nil {
		t.Fatal("Get(\"sprocket\") gave no error")
	}
	for _, s := range append([]string{"parts:", "sprocket"}, want...) {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("error %q does not mention %q", err, s)
		}
	}
	// Each Get builds a fresh part: changing one leaves the next intact.
	a, _ := Get("nut")
	a.Symmetry.Mirrors[0] = r3.Vec{}
	b, _ := Get("nut")
	if b.Symmetry.Mirrors[0] == (r3.Vec{}) {
		t.Error("Get returned shared state")
	}
	if len(All()) != len(want) {
		t.Errorf("All() has %d parts, want %d", len(All()), len(want))
	}
}

// The brief's size range: every part is 20 mm to 150 mm overall.
func TestSizes(t *testing.T) {
	for _, p := range All() {
		s := p.Size()
		big := math.Max(s.X, math.Max(s.Y, s.Z))
		if big < 20*mm || big > 150*mm {
			t.Errorf("%s: largest size %.1f mm outside 20–150 mm", p.Name, big/mm)
		}
		if p.Min.Z != 0 {
			t.Errorf("%s: Min.Z = %g, want 0 (resting on z = 0)", p.Name, p.Min.Z)
		}
	}
}

// Min and Max are the exact extent: no point of any face of the extent
// box is inside the part, and every face comes within one grid step of
// touching it. Grid step g = 0.25 mm: a 1-Lipschitz SDF that is 0 at a
// touching point is at most g/√2 at the nearest grid point on that face.
// The SDF is a distance of order 1e-2 m computed in a few float64
// operations, so "not inside" allows −1e-12 m of rounding.
func TestExtentIsTight(t *testing.T) {
	const g = 0.25 * mm
	for _, p := range All() {
		for axis := 0; axis < 3; axis++ {
			for side, plane := range []float64{comp(p.Min, axis), comp(p.Max, axis)} {
				minD := math.Inf(1)
				u, v := (axis+1)%3, (axis+2)%3
				for a := comp(p.Min, u); a <= comp(p.Max, u)+g/2; a += g {
					for b := comp(p.Min, v); b <= comp(p.Max, v)+g/2; b += g {
						var q r3.Vec
						setComp(&q, axis, plane)
						setComp(&q, u, a)
						setComp(&q, v, b)
						d := p.SDF(q)
						if d < -1e-12 {
							t.Fatalf("%s: extent face axis %d side %d: point %v is inside (SDF %g)", p.Name, axis, side, q, d)
						}
						minD = math.Min(minD, d)
					}
				}
				if minD > g/math.Sqrt2 {
					t.Errorf("%s: extent face axis %d side %d is %g mm from the part, want touching", p.Name, axis, side, minD/mm)
				}
			}
		}
	}
}

func comp(v r3.Vec, i int) float64 {
	switch i {
	case 0:
		return v.X
	case 1:
		return v.Y
	}
	return v.Z
}

func setComp(v *r3.Vec, i int, x float64) {
	switch i {
	case 0:
		v.X = x
	case 1:
		v.Y = x
	default:
		v.Z = x
	}
}

// The origin is the centre of the footprint: the region where the part
// touches z = 0 (inside at z = 1 µm) has its bounding box centred on
// the origin (within the 0.25 mm grid step), and the part's centroid
// (Monte Carlo, below) lies over that footprint at least 5 mm from its
// edge, so the pose is stable.
func TestFootprint(t *testing.T) {
	const g = 0.25 * mm
	for _, p := range All() {
		lo, hi := r3.Vec{X: math.Inf(1), Y: math.Inf(1)}, r3.Vec{X: math.Inf(-1), Y: math.Inf(-1)}
		for x := p.Min.X; x <= p.Max.X; x += g {
			for y := p.Min.Y; y <= p.Max.Y; y += g {
				if p.SDF(r3.Vec{X: x, Y: y, Z: 1e-6}) < 0 {
					lo.X, lo.Y = math.Min(lo.X, x), math.Min(lo.Y, y)
					hi.X, hi.Y = math.Max(hi.X, x), math.Max(hi.Y, y)
				}
			}
		}
		if c := r3.Scale(0.5, r3.Add(lo, hi)); math.Abs(c.X) > g || math.Abs(c.Y) > g {
			t.Errorf("%s: footprint centre (%.2f, %.2f) mm, want the origin", p.Name, c.X/mm, c.Y/mm)
		}
		c := monteCarloCentroid(p, 200000, 7)
		if c.X < lo.X+5*mm || c.X > hi.X-5*mm || c.Y < lo.Y+5*mm || c.Y > hi.Y-5*mm {
			t.Errorf("%s: centroid (%.1f, %.1f) mm not well over the footprint [%.1f, %.1f]×[%.1f, %.1f] mm",
				p.Name, c.X/mm, c.Y/mm, lo.X/mm, hi.X/mm, lo.Y/mm, hi.Y/mm)
		}
	}
}

func monteCarloCentroid(p *Part, n int, seed uint64) r3.Vec {
	rng := rand.New(rand.NewPCG(seed, 99))
	var sum r3.Vec
	k := 0
	for i := 0; i < n; i++ {
		q := randomIn(rng, p.Min, p.Max)
		if p.SDF(q) < 0 {
			sum = r3.Add(sum, q)
			k++
		}
	}
	return r3.Scale(1/float64(k), sum)
}

func randomIn(rng *rand.Rand, lo, hi r3.Vec) r3.Vec {
	return r3.Vec{
		X: lo.X + rng.Float64()*(hi.X-lo.X),
		Y: lo.Y + rng.Float64()*(hi.Y-lo.Y),
		Z: lo.Z + rng.Float64()*(hi.Z-lo.Z),
	}
}

// Monte Carlo volume against the closed-form volume. The share of
// uniform samples in the extent box that fall inside is binomial with
// p = V/V_box, so the estimate's standard error is
// V_box·√(p(1 − p)/N); we accept 4.5 standard errors (a false alarm
// about once in 150 000 seeds; the seed is fixed, so the test is
// deterministic).
func TestVolumeMonteCarlo(t *testing.T) {
	n := 1_000_000
	if testing.Short() {
		n = 200_000
	}
	for i, p := range All() {
		rng := rand.New(rand.NewPCG(uint64(11+i), 13))
		inside := 0
		for k := 0; k < n; k++ {
			if p.SDF(randomIn(rng, p.Min, p.Max)) < 0 {
				inside++
			}
		}
		s := p.Size()
		vbox := s.X * s.Y * s.Z
		want := p.Volume()
		pr := want / vbox
		se := vbox * math.Sqrt(pr*(1-pr)/float64(n))
		got := vbox * float64(inside) / float64(n)
		if math.Abs(got-want) > 4.5*se {
			t.Errorf("%s: Monte Carlo volume %.1f mm³, closed form %.1f mm³, differ by %.1f standard errors",
				p.Name, got/(mm*mm*mm), want/(mm*mm*mm), math.Abs(got-want)/se)
		}
		t.Logf("%s: volume %.1f mm³ (Monte Carlo %.1f ± %.1f), area %.1f mm²", p.Name,
			want/(mm*mm*mm), got/(mm*mm*mm), se/(mm*mm*mm), p.Area()/(mm*mm))
	}
}

// The SDF is 1-Lipschitz (what sphere tracing and the grid sampler rely
// on). Two checks at seeded random points in the extent grown by 5 mm:
// the central-difference gradient has |∇f| ≤ 1 (step 1e-7 m on
// distances of order 1e-2 m: rounding ~1e-18/1e-7 = 1e-11, truncation
// ~1e-14 × curvature up to 1/(0.5 mm); tolerance 1e-6), and for pairs
// of points up to 5 mm apart |f(p) − f(q)| ≤ |p − q| (tolerance 1e-12 m
// of rounding).
func TestLipschitz(t *testing.T) {
	const h = 1e-7
	for i, p := range All() {
		rng := rand.New(rand.NewPCG(uint64(21+i), 23))
		b := p.Bounds(5 * mm)
		lo, hi := b.Min, b.Max
		for k := 0; k < 20000; k++ {
			q := randomIn(rng, lo, hi)
			g := gradient(p.SDF, q, h)
			if n := r3.Norm(g); n > 1+1e-6 {
				t.Fatalf("%s: |∇SDF| = %.9f at %v", p.Name, n, q)
			}
			d := r3.Scale(5*mm*rng.Float64(), unitVec(rng))
			q2 := r3.Add(q, d)
			if diff := math.Abs(p.SDF(q2) - p.SDF(q)); diff > r3.Norm(d)+1e-12 {
				t.Fatalf("%s: |f(p) − f(q)| = %g > |p − q| = %g at %v", p.Name, diff, r3.Norm(d), q)
			}
		}
	}
}

func gradient(f func(r3.Vec) float64, q r3.Vec, h float64) r3.Vec {
	return r3.Vec{
		X: (f(r3.Vec{X: q.X + h, Y: q.Y, Z: q.Z}) - f(r3.Vec{X: q.X - h, Y: q.Y, Z: q.Z})) / (2 * h),
		Y: (f(r3.Vec{X: q.X, Y: q.Y + h, Z: q.Z}) - f(r3.Vec{X: q.X, Y: q.Y - h, Z: q.Z})) / (2 * h),
		Z: (f(r3.Vec{X: q.X, Y: q.Y, Z: q.Z + h}) - f(r3.Vec{X: q.X, Y: q.Y, Z: q.Z - h})) / (2 * h),
	}
}

func unitVec(rng *rand.Rand) r3.Vec {
	for {
		v := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
		if n := r3.Norm(v); n > 1e-9 {
			return r3.Scale(1/n, v)
		}
	}
}

// surfacePoints returns n points on the part's surface: seeded random
// points near it, moved onto it by Newton steps q ← q − f(q)·∇f(q)
// (for a distance function with |∇f| = 1 one step lands on the surface;
// a conservative one needs a few). Points that do not settle within
// 1e-9 m are dropped.
func surfacePoints(p *Part, n int, seed uint64) []r3.Vec {
	rng := rand.New(rand.NewPCG(seed, 31))
	b := p.Bounds(2 * mm)
	lo, hi := b.Min, b.Max
	out := make([]r3.Vec, 0, n)
	for tries := 0; len(out) < n && tries < 50*n; tries++ {
		q := randomIn(rng, lo, hi)
		if math.Abs(p.SDF(q)) > 3*mm {
			continue
		}
		for it := 0; it < 30; it++ {
			d := p.SDF(q)
			if math.Abs(d) < 1e-9 {
				out = append(out, q)
				break
			}
			g := gradient(p.SDF, q, 1e-7)
			g2 := r3.Dot(g, g)
			if g2 < 0.25 {
				break // at a crease or on the medial axis: drop
			}
			q = r3.Sub(q, r3.Scale(d/g2, g))
		}
	}
	return out
}

// The declared symmetry is real: every pose of Symmetry.Rotations and
// every mirror maps the SDF onto itself (tolerance 1e-12 m: the pose's
// rotation is exact to ~1e-16 and the SDF is 1-Lipschitz), and the
// colour follows ColorBreaks: parts whose colour keeps the symmetry
// change by no more than the noise (each side ±amplitude, plus a level
// of rounding), and parts whose colour breaks it show, for every
// non-identity symmetry, surface points whose colours differ clearly in
// HSV (Smith 1978) — what a colour-aware scorer needs to tell the poses
// apart.
func TestSymmetry(t *testing.T) {
	for i, p := range All() {
		s := p.Symmetry
		var maps []func(r3.Vec) r3.Vec
		rots := s.Rotations(12)
		want := map[string]int{"bracket": 2, "bushing": 12, "nut": 12, "valve": 1, "labelbox": 4}[p.Name]
		if len(rots) != want || rots[0] != mesh.Identity() {
			t.Errorf("%s: %d rotations (first %v), want %d starting with the identity", p.Name, len(rots), rots[0], want)
		}
		for _, r := range rots {
			if !near(r.R.Det(), 1, 1e-12) {
				t.Errorf("%s: symmetry rotation with determinant %g", p.Name, r.R.Det())
			}
		}
		for _, r := range rots[1:] {
			maps = append(maps, r.Apply)
		}
		for _, n := range s.Mirrors {
			maps = append(maps, mirror(s.Point, n))
		}
		if p.Name == "valve" && len(maps) != 0 {
			t.Errorf("valve: %d symmetries, want none", len(maps))
		}
		rng := rand.New(rand.NewPCG(uint64(41+i), 43))
		b := p.Bounds(5 * mm)
		lo, hi := b.Min, b.Max
		for k := 0; k < 2000; k++ {
			q := randomIn(rng, lo, hi)
			for j, m := range maps {
				if d0, d1 := p.SDF(q), p.SDF(m(q)); math.Abs(d0-d1) > 1e-12 {
					t.Fatalf("%s: symmetry %d: SDF %g at %v but %g at its image", p.Name, j, d0, q, d1)
				}
			}
		}
		pts := surfacePoints(p, 3000, uint64(51+i))
		if len(pts) < 2000 {
			t.Fatalf("%s: only %d surface points settled", p.Name, len(pts))
		}
		amp := noiseAmplitude(p.Name)
		for j, m := range maps {
			worstRGB, worstHSV := 0.0, 0.0
			for _, q := range pts {
				c0, c1 := p.Color(q), p.Color(m(q))
				worstRGB = math.Max(worstRGB, rgbDiff(c0, c1))
				worstHSV = math.Max(worstHSV, hsvDiff(c0, c1))
			}
			if s.ColorBreaks {
				// A hue 60° off at full saturation, or a saturation or
				// value step of 0.3, counts as clearly different.
				if worstHSV < 0.3 {
					t.Errorf("%s: symmetry %d keeps the colour (largest HSV difference %.3f), want it broken", p.Name, j, worstHSV)
				}
			} else if worstRGB > 2*amp+1 {
				t.Errorf("%s: symmetry %d changes a channel by %.0f levels, more than the noise %.0f", p.Name, j, worstRGB, 2*amp+1)
			}
		}
	}
}

func noiseAmplitude(name string) float64 {
	switch name {
	case "bushing", "nut":
		return metalNoise
	}
	return coatNoise
}

// mirror returns the reflection in the plane through o with unit normal n.
func mirror(o, n r3.Vec) func(r3.Vec) r3.Vec {
	return func(q r3.Vec) r3.Vec {
		return r3.Sub(q, r3.Scale(2*r3.Dot(r3.Sub(q, o), n), n))
	}
}

func rgbDiff(a, b mesh.RGB) float64 {
	d := func(x, y uint8) float64 { return math.Abs(float64(x) - float64(y)) }
	return math.Max(d(a.R, b.R), math.Max(d(a.G, b.G), d(a.B, b.B)))
}

// hsv converts 8-bit RGB to hue (degrees), saturation and value in
// [0, 1] by Smith's hexcone model (Smith 1978, SIGGRAPH):
// V = max, S = (max − min)/max, H by sectors of 60°.
func hsv(c mesh.RGB) (h, s, v float64) {
	r, g, b := float64(c.R)/255, float64(c.G)/255, float64(c.B)/255
	mx, mn := math.Max(r, math.Max(g, b)), math.Min(r, math.Min(g, b))
	v = mx
	if mx == 0 {
		return 0, 0, 0
	}
	s = (mx - mn) / mx
	if mx == mn {
		return 0, s, v
	}
	switch mx {
	case r:
		h = 60 * math.Mod((g-b)/(mx-mn)+6, 6)
	case g:
		h = 60 * ((b-r)/(mx-mn) + 2)
	default:
		h = 60 * ((r-g)/(mx-mn) + 4)
	}
	return h, s, v
}

// hsvDiff is a simple HSV distance: the larger of the saturation and
// value differences and the hue difference (wrapped, in units of 180°)
// weighted by the smaller saturation.
func hsvDiff(a, b mesh.RGB) float64 {
	ha, sa, va := hsv(a)
	hb, sb, vb := hsv(b)
	dh := math.Abs(ha - hb)
	if dh > 180 {
		dh = 360 - dh
	}
	return math.Max(math.Max(math.Abs(sa-sb), math.Abs(va-vb)), dh/180*math.Min(sa, sb))
}

// The worked HSV values of Smith (1978) as given in the project's
// references: the test helper must reproduce them before it judges
// colours.
func TestHSVHelper(t *testing.T) {
	tests := []struct {
		c       mesh.RGB
		h, s, v float64
	}{
		{mesh.RGB{R: 255}, 0, 1, 1},
		{mesh.RGB{G: 255}, 120, 1, 1},
		{mesh.RGB{B: 255}, 240, 1, 1},
		{mesh.RGB{R: 128, G: 128, B: 128}, 0, 0, 0.502},
	}
	for _, tt := range tests {
		h, s, v := hsv(tt.c)
		if !near(h, tt.h, 1e-9) || !near(s, tt.s, 1e-9) || !near(v, tt.v, 5e-4) {
			t.Errorf("hsv(%v) = (%g, %g, %g), want (%g, %g, %g)", tt.c, h, s, v, tt.h, tt.s, tt.v)
		}
	}
}

// BenchmarkSDF and BenchmarkColor time one evaluation at points spread
// over the part's bounds, the inner loop of grid sampling.
func BenchmarkSDF(b *testing.B) {
	for _, p := range All() {
		pts := benchPoints(p)
		b.Run(p.Name, func(b *testing.B) {
			s := 0.0
			i := 0
			for b.Loop() {
				s += p.SDF(pts[i&1023])
				i++
			}
			sinkF = s
		})
	}
}

func BenchmarkColor(b *testing.B) {
	for _, p := range All() {
		pts := benchPoints(p)
		b.Run(p.Name, func(b *testing.B) {
			i := 0
			for b.Loop() {
				sinkC = p.Color(pts[i&1023])
				i++
			}
		})
	}
}

var (
	sinkF float64
	sinkC mesh.RGB
)

func benchPoints(p *Part) []r3.Vec {
	pts := make([]r3.Vec, 1024)
	for i := range pts {
		f := func(k int) float64 { return float64((i*k)%1024) / 1024 }
		pts[i] = r3.Vec{
			X: p.Min.X + f(7)*(p.Max.X-p.Min.X),
			Y: p.Min.Y + f(13)*(p.Max.Y-p.Min.Y),
			Z: p.Min.Z + f(29)*(p.Max.Z-p.Min.Z),
		}
	}
	return pts
}

// SDF and Color run in the grid sampler's inner loop and must not
// allocate.
func TestNoAllocs(t *testing.T) {
	for _, p := range All() {
		q := r3.Scale(0.5, r3.Add(p.Min, p.Max))
		if n := testing.AllocsPerRun(100, func() { sinkF = p.SDF(q) }); n != 0 {
			t.Errorf("%s: SDF allocates %v times per call", p.Name, n)
		}
		if n := testing.AllocsPerRun(100, func() { sinkC = p.Color(q) }); n != 0 {
			t.Errorf("%s: Color allocates %v times per call", p.Name, n)
		}
	}
}
