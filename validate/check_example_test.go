package validate_test

import (
	"fmt"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/validate"
)

// A 40 × 30 × 20 mm box standing on z = 0 with its bottom face missing,
// as a fusion of one sweep leaves it: one opening, the face it stood on.
func ExampleFindOpenings() {
	v := []r3.Vec{
		{X: 0, Y: 0, Z: 0}, {X: 0.04, Y: 0, Z: 0}, {X: 0.04, Y: 0.03, Z: 0}, {X: 0, Y: 0.03, Z: 0},
		{X: 0, Y: 0, Z: 0.02}, {X: 0.04, Y: 0, Z: 0.02}, {X: 0.04, Y: 0.03, Z: 0.02}, {X: 0, Y: 0.03, Z: 0.02},
	}
	f := []mesh.Face{ // outward, the bottom (z = 0) left out
		{4, 5, 6}, {4, 6, 7}, {0, 1, 5}, {0, 5, 4}, {1, 2, 6}, {1, 6, 5}, {2, 3, 7}, {2, 7, 6}, {3, 0, 4}, {3, 4, 7},
	}
	o, err := validate.FindOpenings(&mesh.Mesh{Vertices: v, Faces: f}, 0, 0)
	if err != nil {
		fmt.Println(err)
		return
	}
	op := o.List[0]
	fmt.Printf("%d opening: %.0f mm², perimeter %.0f mm, normal (%.0f, %.0f, %.0f), on the support: %v\n",
		len(o.List), op.Area*1e6, op.Perimeter*1e3, op.Normal.X, op.Normal.Y, op.Normal.Z, op.OnSupport)
	fmt.Printf("holes %.1f%% of the closed surface\n", 100*o.HoleFraction)
	// Output:
	// 1 opening: 1200 mm², perimeter 140 mm, normal (0, 0, -1), on the support: true
	// holes 0.0% of the closed surface
}
