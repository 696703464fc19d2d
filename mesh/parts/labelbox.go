package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// Label box dimensions in millimetres: a closed box 80 (x) × 50 (y) ×
// 30 (z) with all edges rounded to 4 mm, centred over the origin.
const (
	lbHX, lbHY, lbHZ, lbRound = 40.0, 25.0, 15.0, 4.0
	// barcodeBits selects which 1 mm modules of the barcode are black,
	// least significant bit at the left end (x = −26 mm); an arbitrary
	// fixed pattern of our own.
	barcodeBits = uint64(0xB3A59C6D2E71F04B)
	barcodeX0   = -26.0
	barcodeLen  = 52
)

// newLabelBox builds the label box. Its geometry has the symmetry of the
// rectangular box (three mirror planes, half turns about x, y and z
// through its centre); its print breaks every one of them: a paper label
// with text lines and a red arrow pointing +x on the top, and a barcode
// on the +y side.
//
// Volume and area: Steiner's formulas for the rounded box
// (roundBoxVolume, roundBoxArea).
func newLabelBox() *Part {
	const (
		hx, hy, hz, rr = lbHX * mm, lbHY * mm, lbHZ * mm, lbRound * mm
		eps            = 0.5 * mm
	)
	sdf := func(p r3.Vec) float64 { return roundBox(p.X, p.Y, p.Z, 0, 0, hz, hx, hy, hz, rr) }
	// Text lines on the paper label: y band and x end (they start at x = −31 mm).
	lines := [...][3]float64{{12, 15, -2}, {6, 9, -8}, {0, 3, -4}, {-6, -3, -14}, {-14, -9, -10}}
	color := func(p r3.Vec) mesh.RGB {
		x, y, z := p.X/mm, p.Y/mm, p.Z/mm // print layout in millimetres
		n := printNoise * valueNoise(p.X, p.Y, p.Z, printCell, noiseSeedPart+6)
		switch {
		case p.Z > 2*hz-eps: // top face
			if x > -34 && x < 2 && math.Abs(y) < 19 { // paper label
				for _, l := range lines {
					if y > l[0] && y < l[1] && x > -31 && x < l[2] {
						return shade(inkBlack, n)
					}
				}
				return shade(paperWhite, n)
			}
			// Arrow pointing +x: shaft x 8–24, |y| < 3; head x 24–34,
			// half-width 8 at its base narrowing to 0 at the tip.
			if (x > 8 && x < 24 && math.Abs(y) < 3) || (x >= 24 && x < 34 && math.Abs(y) < 0.8*(34-x)) {
				return shade(arrowRed, n)
			}
		case p.Y > hy-eps && math.Abs(x) < 30 && z > 5 && z < 25: // barcode on the +y side
			m := math.Floor(x - barcodeX0)
			if z > 7 && z < 23 && m >= 0 && m < barcodeLen && barcodeBits>>uint(m)&1 == 1 {
				return shade(inkBlack, n)
			}
			return shade(paperWhite, n)
		}
		return shade(kraft, n)
	}
	return &Part{
		Name:        "labelbox",
		Description: "cardboard box 80×50×30 mm with rounded edges, a printed label, an arrow and a barcode",
		SDF:         sdf,
		Color:       color,
		Min:         vmm(-lbHX, -lbHY, 0),
		Max:         vmm(lbHX, lbHY, 2*lbHZ),
		Symmetry: Symmetry{
			Point:       vmm(0, 0, lbHZ),
			Axis:        r3.Vec{Z: 1},
			Fold:        2,
			Flip:        r3.Vec{X: 1},
			Mirrors:     []r3.Vec{{X: 1}, {Y: 1}, {Z: 1}},
			ColorBreaks: true,
		},
		volume: roundBoxVolume(2*lbHX, 2*lbHY, 2*lbHZ, lbRound) * mm * mm * mm,
		area:   roundBoxArea(2*lbHX, 2*lbHY, 2*lbHZ, lbRound) * mm * mm,
	}
}
