package parts_test

import (
	"fmt"

	"github.com/scanfold/scanfold/mesh/parts"
	"gonum.org/v1/gonum/spatial/r3"
)

// Every demo part with its overall size, closed-form volume and area,
// and the number of proper rigid symmetries of its geometry (a solid of
// revolution sampled every 30°).
func Example() {
	for _, name := range parts.Names() {
		p, err := parts.Get(name)
		if err != nil {
			panic(err)
		}
		s := r3.Scale(1e3, p.Size())
		fmt.Printf("%-8s %5.1f × %4.1f × %4.1f mm  %8.1f mm³  %7.1f mm²  %2d symmetries, colour breaks them: %v\n",
			p.Name, s.X, s.Y, s.Z, p.Volume()*1e9, p.Area()*1e6, len(p.Symmetry.Rotations(12)), p.Symmetry.ColorBreaks)
	}
	// Output:
	// bracket   60.0 × 40.0 × 40.0 mm   17901.9 mm³  10121.3 mm²   2 symmetries, colour breaks them: true
	// bushing   40.0 × 40.0 × 30.0 mm   12113.2 mm³   6399.2 mm²  12 symmetries, colour breaks them: false
	// nut       27.7 × 24.0 × 13.0 mm    4424.4 mm³   2256.0 mm²  12 symmetries, colour breaks them: false
	// valve     70.0 × 54.0 × 52.0 mm   89650.4 mm³  18455.9 mm²   1 symmetries, colour breaks them: false
	// labelbox  80.0 × 50.0 × 30.0 mm  117888.2 mm³  14683.1 mm²   4 symmetries, colour breaks them: true
}

// The signed distance is negative inside, zero on the surface and
// positive outside, in metres.
func ExamplePart_SDF() {
	nut, _ := parts.Get("nut")
	for _, p := range []r3.Vec{
		{X: 0.010, Z: 0.0065}, // in the nut's body, 10 mm out along a corner direction
		{Y: 0.012, Z: 0.0065}, // on the middle of a flat (24 mm across flats)
		{Z: 0.0065},           // on the axis, in the bore (Ø14 mm)
	} {
		fmt.Printf("%+.2f mm\n", nut.SDF(p)*1e3)
	}
	// Output:
	// -3.00 mm
	// +0.00 mm
	// +7.00 mm
}
