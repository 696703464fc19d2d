package features_test

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
)

// The point-pair feature of Drost et al. (2010) for a pair worked by
// hand (see TestPairFeatureWorkedExample).
func ExamplePairFeature() {
	f := features.PairFeature(r3.Vec{}, r3.Vec{Z: 1}, r3.Vec{X: -3, Z: 4}, r3.Vec{X: 0.6, Z: 0.8})
	deg := 180 / math.Pi
	fmt.Printf("dist %.1f, angles %.2f° %.2f° %.2f°\n", f.Dist, f.Angle1*deg, f.Angle2*deg, f.Angle3*deg)
	// Output: dist 5.0, angles 36.87° 73.74° 36.87°
}

// Sample a mesh, build its tables, and find it again in a scene: here
// the same surface sampled afresh and moved, so every side is seen.
func ExampleVote() {
	box := &mesh.Mesh{}
	for i := 0; i < 8; i++ {
		box.Vertices = append(box.Vertices, r3.Vec{X: 0.06 * float64(i&1), Y: 0.04 * float64(i>>1&1), Z: 0.02 * float64(i>>2&1)})
	}
	for _, q := range [][4]uint32{{0, 2, 3, 1}, {4, 5, 7, 6}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 4, 6, 2}, {1, 3, 7, 5}} {
		box.Faces = append(box.Faces, mesh.Face{q[0], q[1], q[2]}, mesh.Face{q[0], q[2], q[3]})
	}
	so := mesh.DefaultSampleOptions()
	so.Normals = mesh.NormalsFace
	cloud, spacing, err := mesh.Sample(box, so)
	if err != nil {
		panic(err)
	}
	to := features.DefaultTableOptions()
	to.Spacing = spacing
	model, err := features.BuildTables(context.Background(), cloud, to)
	if err != nil {
		panic(err)
	}
	truth := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: 2, Z: 3}, 0.7, r3.Vec{Z: 0.5})
	so.Seed = 7
	scene, _, err := mesh.Sample(box.Transform(truth), so)
	if err != nil {
		panic(err)
	}
	hyps, err := features.Vote(model, scene, features.DefaultVoteOptions())
	if err != nil {
		panic(err)
	}
	// A box has four proper symmetries, so the best pose is the truth
	// or one of its equivalents; its corners land on the truth's.
	best := hyps[0].ModelToScene
	worst := 0.0
	for _, c := range box.Vertices {
		p := best.Apply(c)
		near := math.Inf(1)
		for _, d := range box.Vertices {
			near = math.Min(near, r3.Norm(r3.Sub(p, truth.Apply(d))))
		}
		worst = math.Max(worst, near)
	}
	fmt.Printf("%d hypotheses; corners within 1 mm: %v\n", len(hyps), worst < 1e-3)
	// Output: 5 hypotheses; corners within 1 mm: true
}
