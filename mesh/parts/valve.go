package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// Valve dimensions in millimetres.
//
//   - Body: a block 50 (x) × 40 (y) × 40 (z) with all edges rounded to
//     3 mm, centred over the origin, standing on z = 0.
//   - Inlet: a Ø26 port along +x on the axis (y, z) = (0, 20) from the
//     body face x = 25 to x = 40, ending in a Ø36 × 5 flange (x 40–45),
//     with a Ø16 blind bore from x = 45 to x = 5.
//   - Outlet: a Ø18 port along −y on the axis (x, z) = (−8, 22) from the
//     face y = −20 to y = −34, with a Ø10 blind bore to y = −5.
//   - Bonnet boss: a Ø24 boss on the top face, z 40–52, with a Ø8 blind
//     bore down to z = 30.
//
// Every port stands on the flat part of its face (away from the 3 mm
// roundings) and no two bores meet, so the volume and area are sums of
// handbook terms.
const (
	vaHX, vaHY, vaHZ, vaRound = 25.0, 20.0, 20.0, 3.0

	vaInR, vaInZ, vaInEnd, vaInBoreR, vaInBoreEnd = 13.0, 20.0, 40.0, 8.0, 5.0
	vaFlR, vaFlEnd                                = 18.0, 45.0

	vaOutR, vaOutX, vaOutZ, vaOutEnd, vaOutBoreR, vaOutBoreEnd = 9.0, -8.0, 22.0, -34.0, 5.0, -5.0

	vaBossR, vaBossTop, vaBossBoreR, vaBossBoreEnd = 12.0, 52.0, 4.0, 30.0

	// The label: a patch on the +y face with three printed lines.
	vaLabelX0, vaLabelX1, vaLabelZ0, vaLabelZ1 = -18.0, 18.0, 8.0, 32.0
)

// roundBoxVolume and roundBoxArea return the volume and surface area of
// a box with outer sizes a × b × c whose edges and corners are rounded
// with radius r: by Steiner's formula for the parallel body of the inner
// box (a', b', c') = (a − 2r, b − 2r, c − 2r),
//
//	V = a'b'c' + 2r(a'b' + b'c' + c'a') + πr²(a' + b' + c') + (4/3)πr³
//	A = 2(a'b' + b'c' + c'a') + 2πr(a' + b' + c') + 4πr²
//
// (faces, quarter-cylinder edges and eighth-ball corners).
func roundBoxVolume(a, b, c, r float64) float64 {
	a, b, c = a-2*r, b-2*r, c-2*r
	return a*b*c + 2*r*(a*b+b*c+c*a) + math.Pi*r*r*(a+b+c) + 4.0/3*math.Pi*r*r*r
}

func roundBoxArea(a, b, c, r float64) float64 {
	a, b, c = a-2*r, b-2*r, c-2*r
	return 2*(a*b+b*c+c*a) + 2*math.Pi*r*(a+b+c) + 4*math.Pi*r*r
}

// newValve builds the valve body.
//
// Volume: the rounded block (Steiner) plus each port's cylinder
// π·r²·length (inlet 25–40, flange 40–45, outlet 20–34, boss 40–52),
// less each bore π·r²·depth (40, 29, 22).
//
// Area: the rounded block; each port adds its side wall 2π·r·length and
// its end face, and removes its footprint on the body (the two cancel);
// each bore adds its wall 2π·r·depth and its flat bottom, and removes its
// mouth (the two cancel); the flange adds its rim 2π·18·5 and the ring
// π(18² − 13²) twice (back face, and the front face being larger than
// the port's end).
func newValve() *Part {
	const (
		hx, hy, hz, rr                = vaHX * mm, vaHY * mm, vaHZ * mm, vaRound * mm
		inR, inZ, inEnd, inBR, inBEnd = vaInR * mm, vaInZ * mm, vaInEnd * mm, vaInBoreR * mm, vaInBoreEnd * mm
		flR, flEnd                    = vaFlR * mm, vaFlEnd * mm
		oR, oX, oZ, oEnd, oBR, oBEnd  = vaOutR * mm, vaOutX * mm, vaOutZ * mm, vaOutEnd * mm, vaOutBoreR * mm, vaOutBoreEnd * mm
		bR, bTop, bBR, bBEnd          = vaBossR * mm, vaBossTop * mm, vaBossBoreR * mm, vaBossBoreEnd * mm
		overlap                       = 2 * mm // ports start inside the body so no two surfaces coincide
		past                          = 1 * mm // bores run out past the open ends
	)
	sdf := func(p r3.Vec) float64 {
		x, y, z := p.X, p.Y, p.Z
		d := roundBox(x, y, z, 0, 0, hz, hx, hy, hz, rr)
		d = union(d, cylinder(y, z-inZ, x, inR, hx-overlap, inEnd))
		d = union(d, cylinder(y, z-inZ, x, flR, inEnd, flEnd))
		d = union(d, cylinder(x-oX, z-oZ, y, oR, oEnd, -hy+overlap))
		d = union(d, cylinder(x, y, z, bR, 2*hz-overlap, bTop))
		d = subtract(d, cylinder(y, z-inZ, x, inBR, inBEnd, flEnd+past))
		d = subtract(d, cylinder(x-oX, z-oZ, y, oBR, oEnd-past, oBEnd))
		d = subtract(d, cylinder(x, y, z, bBR, bBEnd, bTop+past))
		return d
	}
	const (
		lx0, lx1, lz0, lz1 = vaLabelX0 * mm, vaLabelX1 * mm, vaLabelZ0 * mm, vaLabelZ1 * mm
		eps                = 0.5 * mm // how far from a face a surface point may lie and still count as on it
	)
	// Printed lines on the label: x from −15 to the given end, z band.
	lines := [...][3]float64{{10, 26, 29}, {15, 20, 22.5}, {4, 14, 16.5}}
	color := func(p r3.Vec) mesh.RGB {
		x, y, z := p.X, p.Y, p.Z
		n := printNoise * valueNoise(x, y, z, printCell, noiseSeedPart+4)
		switch {
		case y > hy-eps && x > lx0 && x < lx1 && z > lz0 && z < lz1:
			for _, l := range lines {
				if x > -15*mm && x < l[0]*mm && z > l[1]*mm && z < l[2]*mm {
					return shade(inkBlack, n)
				}
			}
			return shade(labelYellow, n)
		case x > flEnd-eps, // flange face
			y < oEnd+eps, // outlet end
			z > bTop-eps, // boss top
			x > inBEnd-eps && math.Hypot(y, z-inZ) < inBR+eps, // bores
			y < oBEnd+eps && math.Hypot(x-oX, z-oZ) < oBR+eps,
			z > bBEnd-eps && math.Hypot(x, y) < bBR+eps:
			return shade(bareSteel, metalNoise*valueNoise(x, y, z, metalCell, noiseSeedPart+5))
		}
		return shade(bodyBlue, n)
	}
	pi := math.Pi
	volume := roundBoxVolume(2*vaHX, 2*vaHY, 2*vaHZ, vaRound) +
		pi*vaInR*vaInR*(vaInEnd-vaHX) + pi*vaFlR*vaFlR*(vaFlEnd-vaInEnd) +
		pi*vaOutR*vaOutR*(-vaHY-vaOutEnd) + pi*vaBossR*vaBossR*(vaBossTop-2*vaHZ) -
		pi*vaInBoreR*vaInBoreR*(vaFlEnd-vaInBoreEnd) -
		pi*vaOutBoreR*vaOutBoreR*(vaOutBoreEnd-vaOutEnd) -
		pi*vaBossBoreR*vaBossBoreR*(vaBossTop-vaBossBoreEnd)
	area := roundBoxArea(2*vaHX, 2*vaHY, 2*vaHZ, vaRound) +
		2*pi*vaInR*(vaInEnd-vaHX) + 2*pi*vaFlR*(vaFlEnd-vaInEnd) + 2*pi*(vaFlR*vaFlR-vaInR*vaInR) +
		2*pi*vaOutR*(-vaHY-vaOutEnd) + 2*pi*vaBossR*(vaBossTop-2*vaHZ) +
		2*pi*vaInBoreR*(vaFlEnd-vaInBoreEnd) +
		2*pi*vaOutBoreR*(vaOutBoreEnd-vaOutEnd) +
		2*pi*vaBossBoreR*(vaBossTop-vaBossBoreEnd)
	return &Part{
		Name:        "valve",
		Description: "valve body 70×54×52 mm: rounded block with a flanged Ø26 mm inlet, a Ø18 mm outlet and a Ø24 mm bonnet boss, blue paint, yellow label",
		SDF:         sdf,
		Color:       color,
		Min:         vmm(-vaHX, vaOutEnd, 0),
		Max:         vmm(vaFlEnd, vaHY, vaBossTop),
		Symmetry:    Symmetry{Fold: 1},
		volume:      volume * mm * mm * mm,
		area:        area * mm * mm,
	}
}
