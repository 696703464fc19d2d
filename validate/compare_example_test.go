package validate_test

import (
	"fmt"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/validate"
)

// Precision, recall and F-score of two small point sets at τ = 0.6
// (the worked example of the tests).
func ExamplePointSetScores() {
	scan := []r3.Vec{{}, {X: 1}, {X: 2}, {X: 5}}
	ref := []r3.Vec{{Y: 0.3}, {X: 1, Z: 0.5}, {X: 3}}
	s, err := validate.PointSetScores(scan, ref, 0.6)
	if err != nil {
		panic(err)
	}
	fmt.Printf("precision %.3f recall %.3f F %.3f Chamfer %.3f Hausdorff-95 %.1f\n",
		s.Precision, s.Recall, s.FScore, s.Chamfer, s.Hausdorff95)
	// Output: precision 0.500 recall 0.667 F 0.571 Chamfer 0.775 Hausdorff-95 2.0
}

// The closest point of a triangle to a point beside its edge lies on
// that edge.
func ExampleClosestPointOnTriangle() {
	a, b, c := r3.Vec{}, r3.Vec{X: 1}, r3.Vec{Y: 1}
	q, region := validate.ClosestPointOnTriangle(r3.Vec{X: 0.5, Y: -1, Z: 0.3}, a, b, c)
	fmt.Println(q, region)
	// Output: {0.5 0 0} edge ab
}
