package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// Nut dimensions in millimetres: an M16 hex nut, 24 across flats and
// 13 high (DIN 934 proportions for M16, from memory), with a plain
// Ø14 bore standing in for the thread's minor diameter, 0.8 mm × 45°
// countersinks on both bore mouths, and the usual 30° chamfer on both
// faces whose circle touches the flats (chamfer circle Ø = across
// flats; common practice on drawings).
const (
	nutFlats  = 24.0
	nutHeight = 13.0
	nutBoreR  = 7.0
	nutSink   = 0.8
)

// nutGeometry holds the derived nut sizes in millimetres.
type nutGeometry struct {
	a, R, h, rb, sink float64 // apothem, circumradius, height, bore radius, countersink
}

func defaultNut() nutGeometry {
	a := nutFlats / 2
	return nutGeometry{a: a, R: 2 * a / math.Sqrt(3), h: nutHeight, rb: nutBoreR, sink: nutSink}
}

// chamferProfile is the half section (radius, z) of the body of
// revolution that the hexagonal prism is intersected with: the two 30°
// cones r = a + √3·z and r = a + √3·(h − z) (30° to the faces, so r
// grows by cot 30° = √3 per unit height), cut by the countersunk bore.
func (g nutGeometry) chamferProfile() polygon {
	mid := g.h / 2
	return polygon{
		{g.rb + g.sink, 0}, {g.a, 0}, {g.a + math.Sqrt(3)*mid, mid}, {g.a, g.h},
		{g.rb + g.sink, g.h}, {g.rb, g.h - g.sink}, {g.rb, g.sink},
	}
}

// boreProfile is the half section of the bore with its countersinks,
// from the axis out; it is used only for the volume and area.
func (g nutGeometry) boreProfile() polygon {
	return polygon{
		{0, 0}, {g.rb + g.sink, 0}, {g.rb, g.sink}, {g.rb, g.h - g.sink}, {g.rb + g.sink, g.h}, {0, g.h},
	}
}

// hexOutsideDisc returns the area of the regular hexagon with apothem a
// that lies outside the concentric disc of radius r, for a ≤ r ≤ R: the
// hexagon's area 2√3·a² less the disc, plus the six circular segments
// the disc pokes out past the flats, each r²·acos(a/r) − a·√(r² − a²)
// (handbook circular-segment area).
func hexOutsideDisc(a, r float64) float64 {
	if r <= a {
		return 2*math.Sqrt(3)*a*a - math.Pi*r*r
	}
	R := 2 * a / math.Sqrt(3)
	if r >= R {
		return 0
	}
	return 2*math.Sqrt(3)*a*a - math.Pi*r*r + 6*(r*r*math.Acos(a/r)-a*math.Sqrt(r*r-a*a))
}

// hexOutsideDiscIntegral returns ∫ from a to R of hexOutsideDisc(a, r) dr
// in closed form. With s = √(r² − a²):
//
//	∫ s dr            = (r·s − a²·ln(r + s))/2
//	∫ r²·acos(a/r) dr = (r³/3)·acos(a/r) − (a/3)·∫ r²/s dr   (by parts)
//	∫ r²/s dr         = (r·s + a²·ln(r + s))/2
//
// (standard table integrals and one integration by parts; nut_test.go
// checks the result against gonum's Gauss–Legendre quadrature).
func hexOutsideDiscIntegral(a float64) float64 {
	R := 2 * a / math.Sqrt(3)
	s := func(r float64) float64 { return math.Sqrt(math.Max(r*r-a*a, 0)) }
	intS := func(r float64) float64 { return (r*s(r) - a*a*math.Log(r+s(r))) / 2 }
	intR2S := func(r float64) float64 { return (r*s(r) + a*a*math.Log(r+s(r))) / 2 }
	intAcos := func(r float64) float64 { return r*r*r/3*math.Acos(math.Min(a/r, 1)) - a/3*intR2S(r) }
	hex := 2 * math.Sqrt(3) * a * a
	return hex*(R-a) - math.Pi*(R*R*R-a*a*a)/3 + 6*((intAcos(R)-intAcos(a))-a*(intS(R)-intS(a)))
}

// volume returns the nut's volume in mm³: the prism 2√3·a²·h, less the
// countersunk bore (a revolved profile), less the corners cut by the two
// cones. At height z above a face the cone has radius r = a + √3·z and
// cuts away hexOutsideDisc(a, r), so each face loses
// ∫ hexOutsideDisc dz = (1/√3)·∫ₐᴿ hexOutsideDisc(a, r) dr.
func (g nutGeometry) volume() float64 {
	prism := 2 * math.Sqrt(3) * g.a * g.a * g.h
	return prism - g.boreProfile().revolvedVolume() - 2/math.Sqrt(3)*hexOutsideDiscIntegral(g.a)
}

// area returns the nut's surface area in mm²:
//
//   - two faces, the chamfer disc less the bore mouth: π(a² − (rb + sink)²) each;
//   - the bore wall and countersinks: the bore profile's revolved area
//     less its two end discs;
//   - two conical chamfer surfaces, each the hexagon outside the disc of
//     radius a, 2√3·a² − π·a², seen at 30° (divide by cos 30°);
//   - six flats, each R × h less, at both ends, the region below the
//     cone, z < (√(a² + t²) − a)/√3 for t ∈ [−R/2, R/2], whose area is
//     (R²/2 + a²·asinh(R/2a) − a·R)/√3 (∫ √(a² + t²) dt =
//     (t·√(a² + t²) + a²·asinh(t/a))/2, and √(a² + R²/4) = R).
func (g nutGeometry) area() float64 {
	mouth := g.rb + g.sink
	faces := 2 * math.Pi * (g.a*g.a - mouth*mouth)
	bore := g.boreProfile().revolvedArea() - 2*math.Pi*mouth*mouth
	cones := 2 * (2*math.Sqrt(3)*g.a*g.a - math.Pi*g.a*g.a) / (math.Sqrt(3) / 2)
	cut := (g.R*g.R/2 + g.a*g.a*math.Asinh(g.R/(2*g.a)) - g.a*g.R) / math.Sqrt(3)
	flats := 6 * (g.R*g.h - 2*cut)
	return faces + bore + cones + flats
}

// newNut builds the hex nut: the hexagonal prism (corners on ±x, flats
// facing ±y) intersected with the chamfer body of revolution.
func newNut() *Part {
	g := defaultNut()
	prof := scalePolygon(g.chamferProfile(), mm)
	a, h := g.a*mm, g.h*mm
	threadR := (g.rb + 0.1) * mm
	sdf := func(p r3.Vec) float64 {
		return intersect(hexPrism(p.X, p.Y, p.Z, a, 0, h), prof.revolve(p.X, p.Y, p.Z))
	}
	color := func(p r3.Vec) mesh.RGB {
		n := metalNoise * valueNoise(p.X, p.Y, p.Z, metalCell, noiseSeedPart+3)
		if math.Hypot(p.X, p.Y) < threadR {
			n -= 30 // the thread in the bore reads darker
		}
		return shade(platedSteel, n)
	}
	var mirrors []r3.Vec
	for k := 0; k < 6; k++ {
		s, c := math.Sincos(float64(k) * math.Pi / 6)
		mirrors = append(mirrors, r3.Vec{X: c, Y: s})
	}
	mirrors = append(mirrors, r3.Vec{Z: 1})
	return &Part{
		Name:        "nut",
		Description: "M16 hex nut, 24 mm across flats, 13 mm high, chamfered both sides, zinc-plated steel",
		SDF:         sdf,
		Color:       color,
		Min:         vmm(-g.R, -g.a, 0),
		Max:         vmm(g.R, g.a, g.h),
		Symmetry: Symmetry{
			Point:   vmm(0, 0, g.h/2),
			Axis:    r3.Vec{Z: 1},
			Fold:    6,
			Flip:    r3.Vec{X: 1},
			Mirrors: mirrors,
		},
		volume: g.volume() * mm * mm * mm,
		area:   g.area() * mm * mm,
	}
}
