package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// bushingProfile is the flanged bushing's half section in millimetres
// (X = radius, Y = z), counter-clockwise: bore Ø20, sleeve Ø28, flange
// Ø40 × 5 thick resting on z = 0, overall height 30; 0.5 mm × 45°
// chamfers on the flange rim, 1 mm × 45° on the sleeve's top outer edge
// and on both bore mouths.
var bushingProfile = polygon{
	{11, 0}, {19.5, 0}, {20, 0.5}, {20, 4.5}, {19.5, 5}, {14, 5},
	{14, 29}, {13, 30}, {11, 30}, {10, 29}, {10, 1},
}

// newBushing builds the flanged bushing, a solid of revolution about z.
// Its volume and area follow from the profile (frustum volume and
// lateral-area formulas summed over the profile's edges; see
// polygon.revolvedVolume and polygon.revolvedArea).
func newBushing() *Part {
	prof := scalePolygon(bushingProfile, mm)
	const boreR = 10.5 * mm // below this radius the surface is the machined bore
	sdf := func(p r3.Vec) float64 { return prof.revolve(p.X, p.Y, p.Z) }
	color := func(p r3.Vec) mesh.RGB {
		n := metalNoise * valueNoise(p.X, p.Y, p.Z, metalCell, noiseSeedPart+2)
		if math.Hypot(p.X, p.Y) < boreR {
			return shade(bronzeBright, n)
		}
		return shade(bronze, n)
	}
	return &Part{
		Name:        "bushing",
		Description: "flanged bushing Ø40 mm flange, Ø28 mm sleeve, Ø20 mm bore, 30 mm long, bronze",
		SDF:         sdf,
		Color:       color,
		Min:         vmm(-20, -20, 0),
		Max:         vmm(20, 20, 30),
		Symmetry: Symmetry{
			Axis: r3.Vec{Z: 1},
			Fold: 0,
		},
		volume: prof.revolvedVolume(),
		area:   prof.revolvedArea(),
	}
}

// scalePolygon returns a copy of pg with every coordinate multiplied by s.
func scalePolygon(pg polygon, s float64) polygon {
	out := make(polygon, len(pg))
	for i, v := range pg {
		out[i] = vec2{v.X * s, v.Y * s}
	}
	return out
}
