package parts

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/spatial/r3"
)

// The closed-form corner-chamfer integral against gonum's fixed
// Gauss–Legendre quadrature (gonum/integrate/quad). The integrand has a
// square-root onset at r = a, which slows the quadrature's convergence;
// with 4000 nodes the quadrature error is below 1e-7 of the value, so
// the tolerance is 1e-6 relative.
func TestHexOutsideDiscIntegral(t *testing.T) {
	for _, a := range []float64{1, 12, 0.012} {
		R := 2 * a / math.Sqrt(3)
		want := quad.Fixed(func(r float64) float64 { return hexOutsideDisc(a, r) }, a, R, 4000, quad.Legendre{}, 0)
		if got := hexOutsideDiscIntegral(a); math.Abs(got-want) > 1e-6*math.Abs(want) {
			t.Errorf("a = %g: closed form %.12g, quadrature %.12g", a, got, want)
		}
	}
}

// The hexagon-outside-disc area against a seeded 2-D Monte Carlo count
// (binomial standard error, 4.5 standard errors), and its end values:
// the hexagon less the inscribed disc at r = a, nothing at r = R.
func TestHexOutsideDisc(t *testing.T) {
	a := 1.0
	R := 2 / math.Sqrt(3)
	hex := 2 * math.Sqrt(3) * a * a // (3√3/2)·R² = 2√3·a² (handbook)
	if got, want := hexOutsideDisc(a, a), hex-math.Pi; !near(got, want, 1e-12) {
		t.Errorf("at r = a: %g, want %g", got, want)
	}
	if got := hexOutsideDisc(a, R); !near(got, 0, 1e-12) {
		t.Errorf("at r = R: %g, want 0", got)
	}
	rng := rand.New(rand.NewPCG(61, 62))
	const n = 400000
	for _, r := range []float64{1.03, 1.08, 1.12} {
		k := 0
		for i := 0; i < n; i++ {
			x, y := (2*rng.Float64()-1)*R, (2*rng.Float64()-1)*a
			if hex2(x, y, a) < 0 && math.Hypot(x, y) > r {
				k++
			}
		}
		boxA := 4 * R * a
		want := hexOutsideDisc(a, r)
		p := want / boxA
		se := boxA * math.Sqrt(p*(1-p)/n)
		if got := boxA * float64(k) / n; math.Abs(got-want) > 4.5*se {
			t.Errorf("r = %g: Monte Carlo %.6f, closed form %.6f (%.1f standard errors)", r, got, want, math.Abs(got-want)/se)
		}
	}
}

// The corners cut off by the two chamfer cones, counted by Monte Carlo
// in the thin slab where they are (z below the corners' chamfer height
// (R − a)/√3 over the bottom face, doubled for the top by the mirror
// symmetry), against the closed-form 2/√3·∫ hexOutsideDisc dr. The whole
// nut's volume test resolves these 30 mm³ only at about 7 standard
// errors; here they are the main term.
func TestNutChamferVolume(t *testing.T) {
	g := defaultNut()
	p, _ := Get("nut")
	zc := (g.R - g.a) / math.Sqrt(3) * mm
	lo := r3.Vec{X: -g.R * mm, Y: -g.a * mm, Z: 0}
	hi := r3.Vec{X: g.R * mm, Y: g.a * mm, Z: zc}
	rng := rand.New(rand.NewPCG(63, 64))
	n := 400000
	k := 0
	for i := 0; i < n; i++ {
		q := randomIn(rng, lo, hi)
		inPrism := hexPrism(q.X, q.Y, q.Z, g.a*mm, 0, g.h*mm) < 0
		if inPrism && math.Hypot(q.X, q.Y) > g.a*mm && p.SDF(q) > 0 {
			k++
		}
	}
	boxV := (hi.X - lo.X) * (hi.Y - lo.Y) * (hi.Z - lo.Z)
	want := hexOutsideDiscIntegral(g.a*mm) / math.Sqrt(3) // one face
	pr := want / boxV
	se := boxV * math.Sqrt(pr*(1-pr)/float64(n))
	got := boxV * float64(k) / float64(n)
	if math.Abs(got-want) > 4.5*se {
		t.Errorf("chamfer volume per face: Monte Carlo %.3f mm³, closed form %.3f mm³ (%.1f standard errors)",
			got/(mm*mm*mm), want/(mm*mm*mm), math.Abs(got-want)/se)
	}
}

// The nut's area terms that come from integrals, against gonum's
// quadrature of the integrals as set up from the geometry: the cone
// surface ∫ r·θ(r)·(2/√3) dr, θ(r) = 2π − 12·acos(a/r) the angle of the
// circle of radius r inside the hexagon and 2/√3 the slant factor of a
// 30° cone; and the region of a flat below the cone,
// ∫ (√(a² + t²) − a)/√3 dt over the side's length.
func TestNutAreaTerms(t *testing.T) {
	g := defaultNut()
	cone := quad.Fixed(func(r float64) float64 {
		return r * (2*math.Pi - 12*math.Acos(math.Min(g.a/r, 1))) * 2 / math.Sqrt(3)
	}, g.a, g.R, 2000, quad.Legendre{}, 0)
	cut := quad.Fixed(func(s float64) float64 {
		return (math.Sqrt(g.a*g.a+s*s) - g.a) / math.Sqrt(3)
	}, -g.R/2, g.R/2, 200, quad.Legendre{}, 0)
	mouth := g.rb + g.sink
	faces := 2 * math.Pi * (g.a*g.a - mouth*mouth)
	bore := 2*math.Pi*g.rb*(g.h-2*g.sink) + 2*math.Pi*(g.rb+mouth)*g.sink*math.Sqrt2 // wall and two 45° frusta
	want := faces + bore + 2*cone + 6*(g.R*g.h-2*cut)
	if got := g.area(); math.Abs(got-want) > 1e-6*want {
		t.Errorf("nut area %.9g mm², from quadrature %.9g mm²", got, want)
	}
}
