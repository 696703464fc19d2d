package features

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// boxAt returns a closed box mesh with the given minimum corner and size
// (12 triangles, counter-clockwise from outside).
func boxAt(lo, size r3.Vec) *mesh.Mesh {
	m := &mesh.Mesh{}
	for i := 0; i < 8; i++ {
		v := lo
		if i&1 != 0 {
			v.X += size.X
		}
		if i&2 != 0 {
			v.Y += size.Y
		}
		if i&4 != 0 {
			v.Z += size.Z
		}
		m.Vertices = append(m.Vertices, v)
	}
	for _, q := range [][4]uint32{{0, 2, 3, 1}, {4, 5, 7, 6}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 4, 6, 2}, {1, 3, 7, 5}} {
		m.Faces = append(m.Faces, mesh.Face{q[0], q[1], q[2]}, mesh.Face{q[0], q[2], q[3]})
	}
	return m
}

// merge concatenates meshes.
func merge(ms ...*mesh.Mesh) *mesh.Mesh {
	out := &mesh.Mesh{}
	for _, m := range ms {
		base := uint32(len(out.Vertices))
		out.Vertices = append(out.Vertices, m.Vertices...)
		for _, f := range m.Faces {
			out.Faces = append(out.Faces, mesh.Face{f[0] + base, f[1] + base, f[2] + base})
		}
	}
	return out
}

// blockPart is an invented asymmetric test part: a 60×40×20 mm block
// with a 20×15×25 mm post near one corner and a 10 mm cube on one side.
func blockPart() *mesh.Mesh {
	return merge(
		boxAt(r3.Vec{X: -0.03, Y: -0.02}, r3.Vec{X: 0.06, Y: 0.04, Z: 0.02}),
		boxAt(r3.Vec{X: 0.005, Y: 0.0, Z: 0.02}, r3.Vec{X: 0.02, Y: 0.015, Z: 0.025}),
		boxAt(r3.Vec{X: -0.025, Y: -0.03, Z: 0.0}, r3.Vec{X: 0.01, Y: 0.01, Z: 0.01}),
	)
}

// addErr is the ADD pose error (Hinterstoisser et al. 2012, ACCV): the
// mean distance between model points under the true and the estimated
// pose.
func addErr(pts []r3.Vec, truth, est mesh.Pose) float64 {
	var s float64
	for _, p := range pts {
		s += r3.Norm(r3.Sub(truth.Apply(p), est.Apply(p)))
	}
	return s / float64(len(pts))
}

// addsErr is ADD-S (Hinterstoisser et al. 2012): the mean over model
// points under the estimate of the distance to the nearest model point
// under the true pose (brute force).
func addsErr(pts []r3.Vec, truth, est mesh.Pose) float64 {
	tp := make([]r3.Vec, len(pts))
	for i, p := range pts {
		tp[i] = truth.Apply(p)
	}
	tree := mesh.NewKDTree(tp)
	var s float64
	for _, p := range pts {
		_, d2 := tree.Nearest(est.Apply(p))
		s += math.Sqrt(d2)
	}
	return s / float64(len(pts))
}

// viewCloud samples m under pose modelToCam and keeps the points whose
// normals face the camera at the origin (back-face culling; no
// occlusion): a crude single view for tests that need no renderer.
func viewCloud(t testing.TB, m *mesh.Mesh, modelToCam mesh.Pose, spacing float64, seed uint64) *mesh.Cloud {
	opt := mesh.DefaultSampleOptions()
	opt.Spacing = spacing
	opt.Seed = seed
	opt.Normals = mesh.NormalsFace
	c, _, err := mesh.Sample(m.Transform(modelToCam), opt)
	if err != nil {
		t.Fatal(err)
	}
	var keep []int
	for i, p := range c.Points {
		if r3.Dot(c.Normals[i], p) < -0.1*r3.Norm(p) {
			keep = append(keep, i)
		}
	}
	return c.Subset(keep)
}

func modelOf(t testing.TB, m *mesh.Mesh) *Model {
	opt := mesh.DefaultSampleOptions()
	if m.Normals == nil {
		opt.Normals = mesh.NormalsFace // flat-faced test meshes
	}

	c, spacing, err := mesh.Sample(m, opt)
	if err != nil {
		t.Fatal(err)
	}
	to := DefaultTableOptions()
	to.Spacing = spacing

	model, err := BuildTables(context.Background(), c, to)
	if err != nil {
		t.Fatal(err)
	}
	return model
}

func randomView(rng *rand.Rand) mesh.Pose {
	return mesh.PoseFromAxisAngle(randUnit(rng), rng.Float64()*math.Pi,
		r3.Vec{X: 0.05 * (rng.Float64() - 0.5), Y: 0.05 * (rng.Float64() - 0.5), Z: 0.4 + 0.2*rng.Float64()})
}

// TestVoteRecoversPose votes for an asymmetric part in single views
// sampled from its mesh and checks the best hypothesis by ADD against
// the 10%-of-diameter criterion of Hinterstoisser et al. (2012), before
// and after refinement.
func TestVoteRecoversPose(t *testing.T) {
	part := blockPart()
	model := modelOf(t, part)
	t.Logf("model: %d points, diameter %.4f m, %d pairs, %d keys", len(model.Cloud().Points), model.Diameter, model.Pairs(), model.Keys())
	rng := rand.New(rand.NewPCG(1, 2))
	pts := model.Cloud().Points
	views := 8
	ok, okVoted := 0, 0
	for v := 0; v < views; v++ {
		truth := randomView(rng)
		scene := viewCloud(t, part, truth, model.Spacing, uint64(100+v))
		hyps, err := Vote(model, scene, DefaultVoteOptions())
		if err != nil {
			t.Fatal(err)
		}
		if len(hyps) == 0 {
			t.Errorf("view %d: no hypotheses", v)
			continue
		}
		h := hyps[0]
		eV := addErr(pts, truth, h.Voted)
		eR := addErr(pts, truth, h.ModelToScene)
		t.Logf("view %d: %d scene points, votes %.0f (%d members), ADD voted %.2f mm, refined %.3f mm (refined %v)",
			v, len(scene.Points), h.Votes, h.Members, eV*1e3, eR*1e3, h.Refined)
		if eV < 0.1*model.Diameter {
			okVoted++
		}
		if eR < 0.1*model.Diameter {
			ok++
		}
	}
	if ok < views-1 {
		t.Errorf("%d of %d views within ADD < 0.1·diameter", ok, views)
	}
}

// TestDampedICPMatchesMeshICP checks the refinement's damped ICP
// (mesh.ICPPointToPlane with ICPOptions.Damping = icpDamping) against
// the undamped solver on views that constrain all six degrees of
// freedom: both must reach the same pose. On views that leave a
// direction free, the undamped solver refuses the singular system, and
// the damped one must not wander: its error stays within the starting
// error.
func TestDampedICPMatchesMeshICP(t *testing.T) {
	part := blockPart()
	model := modelOf(t, part)
	rng := rand.New(rand.NewPCG(1, 2))
	pts := model.Cloud().Points
	opt := mesh.DefaultICPOptions()
	opt.MaxDistance = 0.1 * model.Diameter
	opt.HuberDelta = model.Spacing
	both := 0
	for v := 0; v < 8; v++ {
		truth := randomView(rng)
		scene := viewCloud(t, part, truth, model.Spacing, uint64(100+v))
		tree := mesh.NewKDTree(scene.Points)
		init := mesh.PoseFromAxisAngle(randUnit(rng), 0.03, truth.T).Mul(mesh.Pose{R: truth.R})
		e0 := addErr(pts, truth, init)
		r1, err1 := mesh.ICPPointToPlane(model.Cloud(), scene, tree, init, opt)
		damped := opt
		damped.Damping = icpDamping
		r2, err2 := mesh.ICPPointToPlane(model.Cloud(), scene, tree, init, damped)
		if err2 != nil {
			t.Fatalf("view %d: %v", v, err2)
		}
		e2 := addErr(pts, truth, r2.Pose)
		if err1 == nil {
			both++
			// Same minimum: the sampled scene lies on the same planes as
			// the model, so both converge to the truth up to the stop
			// thresholds (1e-7 m, 1e-6 rad × 5 cm ≈ 5e-8 m).
			if d := addErr(pts, r1.Pose, r2.Pose); d > 1e-6 {
				t.Errorf("view %d: poses differ by %.3g m (ADD)", v, d)
			}
		} else if e2 > e0*1.05 {
			t.Errorf("view %d: unconstrained view, damped ICP moved from %.3g to %.3g m", v, e0, e2)
		}
	}
	if both < 4 {
		t.Errorf("only %d well-constrained views compared", both)
	}
}

// TestVoteDeterministic: the hypotheses do not depend on the number of
// workers.
func TestVoteDeterministic(t *testing.T) {
	part := blockPart()
	model := modelOf(t, part)
	rng := rand.New(rand.NewPCG(3, 4))
	scene := viewCloud(t, part, randomView(rng), model.Spacing, 5)
	var ref []Hypothesis
	for _, w := range []int{1, 2, 3, 7} {
		opt := DefaultVoteOptions()
		opt.Workers = w
		hyps, err := Vote(model, scene, opt)
		if err != nil {
			t.Fatal(err)
		}
		if ref == nil {
			ref = hyps
			continue
		}
		if len(hyps) != len(ref) {
			t.Fatalf("%d workers: %d hypotheses, 1 worker: %d", w, len(hyps), len(ref))
		}
		for i := range hyps {
			if hyps[i].Votes != ref[i].Votes || hyps[i].Voted != ref[i].Voted || hyps[i].ModelToScene != ref[i].ModelToScene {
				t.Fatalf("%d workers: hypothesis %d differs", w, i)
			}
		}
	}
}

func TestVoteErrorsAndEmpty(t *testing.T) {
	model := modelOf(t, blockPart())
	if _, err := Vote(model, &mesh.Cloud{Points: []r3.Vec{{}}}, DefaultVoteOptions()); err == nil {
		t.Error("scene without normals: no error")
	}
	if _, err := Vote(model, &mesh.Cloud{Points: []r3.Vec{{X: math.NaN()}}, Normals: []r3.Vec{{Z: 1}}}, DefaultVoteOptions()); err == nil {
		t.Error("NaN scene point: no error")
	}
	if _, err := Vote(&Model{}, &mesh.Cloud{}, DefaultVoteOptions()); err == nil {
		t.Error("empty model: no error")
	}
	bad := DefaultVoteOptions()
	bad.ReferenceStep = 0
	if _, err := Vote(model, &mesh.Cloud{}, bad); err == nil {
		t.Error("reference step 0: no error")
	}
	// An empty scene and a scene of one point give no hypotheses.
	for _, sc := range []*mesh.Cloud{{}, {Points: []r3.Vec{{Z: 0.5}}, Normals: []r3.Vec{{Z: -1}}}} {
		hyps, err := Vote(model, sc, DefaultVoteOptions())
		if err != nil || len(hyps) != 0 {
			t.Errorf("%d-point scene: %d hypotheses, %v", len(sc.Points), len(hyps), err)
		}
	}
}

// TestVerify: in a scene that is the demo bracket's whole cloud, the
// pose with its flanges swapped (a quarter turn about the bend, as the
// recall test's wrong views show) explains far fewer scene points than
// the right pose and loses the front place it had from the votes; a
// pose that explains about as much as the vote winner (the right one,
// shifted by a tenth of the spacing) does not overtake it.
func TestVerify(t *testing.T) {
	m, _ := partMesh(t, "bracket")
	model := modelOf(t, m)
	scene := model.Cloud().Points
	right := mesh.Identity()
	swapped := mesh.PoseFromAxisAngle(r3.Vec{X: -1}, math.Pi/2, r3.Vec{Y: -0.02, Z: 0.02})
	hyps := []Hypothesis{{ModelToScene: swapped, Votes: 2, Refined: true}, {ModelToScene: right, Votes: 1, Refined: true}}
	model.verify(hyps, scene)
	if hyps[0].ModelToScene != right || hyps[0].Support != len(scene) || hyps[1].Support > len(scene)*3/4 {
		t.Errorf("after verification: first %v support %d, second support %d of %d scene points", hyps[0].ModelToScene, hyps[0].Support, hyps[1].Support, len(scene))
	}
	near := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: 0.1 * model.Spacing}}
	hyps = []Hypothesis{{ModelToScene: near, Votes: 2, Refined: true}, {ModelToScene: right, Votes: 1, Refined: true}}
	model.verify(hyps, scene)
	if hyps[0].ModelToScene != near {
		t.Errorf("a pose explaining about as much overtook the vote winner: supports %d, %d", hyps[0].Support, hyps[1].Support)
	}
}
