package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// Bracket dimensions in millimetres. The L profile lies in the y–z
// plane with its outer corner on the line y = −bkHalfY, z = 0 and is
// extruded along x.
const (
	bkLen    = 60.0 // along x
	bkLeg    = 40.0 // each flange, from the outer corner
	bkThick  = 4.0  // both flanges
	bkFillet = 3.0  // inner-corner fillet radius
	bkHoleR  = 4.25 // Ø8.5 mm through holes, M8 clearance (from memory)
	bkHoleAt = 24.0 // hole centre from the outer corner, along each flange
	bkHalfY  = bkLeg / 2
	// Paint mark: a round dab on the outer face of the upright flange
	// (y = −20 mm), off the x-mirror plane.
	bkDabX, bkDabZ, bkDabR = 16.0, 27.0, 7.0
)

// newBracket builds the angle bracket.
//
// Geometry: base flange x ∈ [−30, 30], y ∈ [−20, 20], z ∈ [0, 4];
// upright flange y ∈ [−20, −16], z ∈ [0, 40]; a fillet of radius 3 in the
// inner corner (the square y ∈ [−16, −13], z ∈ [4, 7] less the disc of
// radius 3 about (y, z) = (−13, 7)); a Ø8.5 hole through the base at
// (x, y) = (0, 4) and one through the upright at (x, z) = (0, 24). The
// profile is symmetric about the corner's bisector and the holes sit at
// equal distances (24 mm) from the outer corner along each flange, so
// the geometry has the half turn about the bisector axis.
//
// Volume: L profile area 40·4 + 36·4 = 304 mm² plus fillet
// (1 − π/4)·3² (square less a quarter disc), times the length 60, less
// two holes π·4.25²·4 (handbook prism and cylinder volumes).
//
// Area: two profile end faces; the profile perimeter 2·40 + 2·4 +
// 2·(36 − 3) + (π/2)·3 times the length; less the four hole mouths
// 2·2·π·4.25²; plus the two hole walls 2·(2π·4.25·4).
func newBracket() *Part {
	const (
		L, l, t, f, hr, ha, hy = bkLen * mm, bkLeg * mm, bkThick * mm, bkFillet * mm, bkHoleR * mm, bkHoleAt * mm, bkHalfY * mm
		dabX, dabZ, dabR       = bkDabX * mm, bkDabZ * mm, bkDabR * mm
	)
	sdf := func(p r3.Vec) float64 {
		x, y, z := p.X, p.Y, p.Z
		base := box(x, y, z, 0, 0, t/2, L/2, l/2, t/2)
		upright := box(x, y, z, 0, -hy+t/2, l/2, L/2, t/2, l/2)
		// Fillet: the square between the flanges less a disc; both
		// pieces are extrusions along x of exact 2-D distances.
		sq := box(x, y, z, 0, -hy+t+f/2, t+f/2, L/2, f/2, f/2)
		disc := cylinder(y-(-hy+t+f), z-(t+f), x, f, -L, L)
		fillet := subtract(sq, disc)
		d := union(union(base, upright), fillet)
		// Holes, as cylinders longer than the flanges are thick.
		d = subtract(d, cylinder(x, y-(-hy+ha), z, hr, -t, 2*t))
		d = subtract(d, cylinder(x, z-ha, y, hr, -hy-t, -hy+2*t))
		return d
	}
	color := func(p r3.Vec) mesh.RGB {
		// The dab sits on the outer face of the upright (y = −20 mm);
		// points on that face within the dab's radius are red.
		if p.Y < -hy+0.5*mm && math.Hypot(p.X-dabX, p.Z-dabZ) < dabR {
			return shade(paintRed, printNoise*valueNoise(p.X, p.Y, p.Z, printCell, noiseSeedPart))
		}
		return shade(powderGrey, coatNoise*valueNoise(p.X, p.Y, p.Z, coatCell, noiseSeedPart+1))
	}
	profile := bkLeg*bkThick + (bkLeg-bkThick)*bkThick + (1-math.Pi/4)*bkFillet*bkFillet
	holeMouth := math.Pi * bkHoleR * bkHoleR
	volume := profile*bkLen - 2*holeMouth*bkThick
	perimeter := 2*bkLeg + 2*bkThick + 2*(bkLeg-bkThick-bkFillet) + math.Pi/2*bkFillet
	area := 2*profile + perimeter*bkLen - 2*2*holeMouth + 2*(2*math.Pi*bkHoleR*bkThick)
	u := 1 / math.Sqrt2
	return &Part{
		Name:        "bracket",
		Description: "angle bracket 60×40×40 mm, 4 mm thick, two Ø8.5 mm holes, grey powder coat with a red paint mark",
		SDF:         sdf,
		Color:       color,
		Min:         vmm(-bkLen/2, -bkHalfY, 0),
		Max:         vmm(bkLen/2, bkHalfY, bkLeg),
		Symmetry: Symmetry{
			Point:       vmm(0, -bkHalfY, 0),
			Axis:        r3.Vec{Y: u, Z: u},
			Fold:        2,
			Mirrors:     []r3.Vec{{X: 1}, {Y: u, Z: -u}},
			ColorBreaks: true,
		},
		volume: volume * mm * mm * mm,
		area:   area * mm * mm,
	}
}
