package validate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// scoreModel samples 1000 oriented, coloured points from the part mesh.
func scoreModel(t testing.TB, m *mesh.Mesh) (*ScoreModel, *mesh.Cloud) {
	t.Helper()
	c, _, err := mesh.SampleSurface(m, 1000, 7, mesh.NormalsInterpolated)
	if err != nil {
		t.Fatal(err)
	}
	sm, err := NewScoreModel(c)
	if err != nil {
		t.Fatal(err)
	}
	return sm, c
}

// turnAbout returns pose followed by a rotation by angle about axis
// through the camera-frame point c.
func turnAbout(pose mesh.Pose, c, axis r3.Vec, angle float64) mesh.Pose {
	r := mesh.Pose{R: mesh.RotationFromAxisAngle(axis, angle)}
	r.T = r3.Sub(c, r.R.MulVec(c))
	return r.Mul(pose)
}

// On rendered scenes the true pose outscores the pose turned by 90°
// about its centre and the pose shifted by 20 % of the diameter, for
// both scorers (the task's acceptance test for a scorer).
func TestScorersPreferTruth(t *testing.T) {
	if testing.Short() {
		t.Skip("renders scenes")
	}
	for _, name := range []string{"valve", "labelbox", "bracket"} {
		opt := DefaultSceneOptions()
		opt.MaxOcclusion = 0.2
		g, m := sceneGen(t, name, opt)
		sm, _ := scoreModel(t, m)
		d := m.Diameter()
		centre := m.Bounds().Center()
		rng := rand.New(rand.NewPCG(31, 32))
		for i := 0; i < 4; i++ {
			sc, err := g.Scene(i)
			if err != nil {
				t.Fatal(err)
			}
			obs, err := ObservationFromFrame(sc.Frame)
			if err != nil {
				t.Fatal(err)
			}
			c := sc.ModelToCam.Apply(centre)
			wrong := map[string]mesh.Pose{
				"turned 90°":  turnAbout(sc.ModelToCam, c, randomUnit(rng), math.Pi/2),
				"shifted 20%": {R: sc.ModelToCam.R, T: r3.Add(sc.ModelToCam.T, r3.Scale(0.2*d, randomUnit(rng)))},
			}
			bt := BaselineScore(sm, sc.ModelToCam, obs, DefaultBaselineOptions())
			pt := PointScore(sm, sc.ModelToCam, obs, DefaultPointScoreOptions())
			for what, p := range wrong {
				bw := BaselineScore(sm, p, obs, DefaultBaselineOptions())
				pw := PointScore(sm, p, obs, DefaultPointScoreOptions())
				t.Logf("%s scene %d %s: baseline %.3f vs true %.3f; point %.3f vs true %.3f", name, i, what, bw.Score, bt.Score, pw.Score, pt.Score)
				if !(bt.Score > bw.Score) {
					t.Errorf("%s scene %d: baseline scores %s %.3f ≥ true %.3f", name, i, what, bw.Score, bt.Score)
				}
				if !(pt.Score > pw.Score) {
					t.Errorf("%s scene %d: point score %s %.3f ≥ true %.3f", name, i, what, pw.Score, pt.Score)
				}
			}
		}
	}
}

// labelledSet renders occluded, cluttered scenes of a part and returns
// the true pose and perturbed hypotheses of each, labelled by ADD(-S) <
// 10 % of the diameter: ADD-S for a part whose geometry and colour are
// symmetric, ADD when the colour breaks the symmetry (the print tells
// the poses apart, so the cell must too).
func labelledSet(t testing.TB, name string, scenes, perScene int, seed uint64) ([]Labelled, *ScoreModel) {
	t.Helper()
	opt := DefaultSceneOptions()
	opt.MinOcclusion, opt.MaxOcclusion = 0.3, 0.5
	opt.MinClutter = 2
	opt.Seed = seed
	g, m := sceneGen(t, name, opt)
	sm, cloud := scoreModel(t, m)
	_, p := partMesh(t, name)
	syms := p.Symmetry.Rotations(36)
	symmetric := len(syms) > 1 && !p.Symmetry.ColorBreaks
	em, err := NewErrorModel(cloud.Points, syms)
	if err != nil {
		t.Fatal(err)
	}
	centre := m.Bounds().Center()
	rng := rand.New(rand.NewPCG(seed, 99))
	var set []Labelled
	for i := 0; i < scenes; i++ {
		sc, err := g.Scene(i)
		if err != nil {
			t.Fatal(err)
		}
		obs, err := ObservationFromFrame(sc.Frame)
		if err != nil {
			t.Fatal(err)
		}
		hyps := append([]mesh.Pose{sc.ModelToCam}, PerturbedHypotheses(sc.ModelToCam, centre, em.Diameter(), perScene, rng)...)
		for k, right := range LabelHypotheses(em, sc.ModelToCam, hyps, symmetric) {
			set = append(set, Labelled{Obs: obs, ModelToCam: hyps[k], Right: right})
		}
	}
	return set, sm
}

// On occluded scenes (30–50 % of the part hidden, clutter) the
// point-difference score separates right from wrong hypotheses better
// than the depth-inlier baseline: a larger ROC area. The numbers are
// logged for the report.
func TestPointScoreSeparatesBetter(t *testing.T) {
	if testing.Short() {
		t.Skip("renders scenes")
	}
	for _, name := range []string{"valve", "labelbox"} {
		set, sm := labelledSet(t, name, 6, 30, 5)
		var br, bw, pr, pw []float64
		for _, l := range set {
			b := BaselineScore(sm, l.ModelToCam, l.Obs, DefaultBaselineOptions()).Score
			p := PointScore(sm, l.ModelToCam, l.Obs, DefaultPointScoreOptions()).Score
			if l.Right {
				br, pr = append(br, b), append(pr, p)
			} else {
				bw, pw = append(bw, b), append(pw, p)
			}
		}
		bs, ps := Separate(br, bw), Separate(pr, pw)
		t.Logf("%s: %d right, %d wrong; baseline AUC %.4f gap %.3f; point score AUC %.4f gap %.3f", name, len(br), len(bw), bs.AUC, bs.Gap, ps.AUC, ps.Gap)
		if !ps.better(bs) {
			t.Errorf("%s: point score (AUC %.4f, gap %.3f) does not separate better than the baseline (AUC %.4f, gap %.3f)", name, ps.AUC, ps.Gap, bs.AUC, bs.Gap)
		}
		cb, err := Calibrate(br, bw, DefaultCalibrationOptions())
		if err != nil {
			t.Fatal(err)
		}
		cp, err := Calibrate(pr, pw, DefaultCalibrationOptions())
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("%s: baseline threshold %.3f accepts %.2f of right, %.3f of wrong; point score threshold %.3f accepts %.2f of right, %.3f of wrong",
			name, cb.Threshold, cb.TrueAcceptRate, cb.FalseAcceptRate, cp.Threshold, cp.TrueAcceptRate, cp.FalseAcceptRate)
	}
}

// CalibrateWeights on labelled renders: the chosen weights separate at
// least as well as the defaults on the same set (they are among the
// grid's candidates), and are logged.
func TestCalibrateWeights(t *testing.T) {
	if testing.Short() {
		t.Skip("renders scenes")
	}
	for _, name := range []string{"valve", "labelbox"} {
		set, sm := labelledSet(t, name, 4, 24, 9)
		best, sep, err := CalibrateWeights(sm, set, DefaultPointScoreOptions(), DefaultWeightGrid())
		if err != nil {
			t.Fatal(err)
		}
		var r, w []float64
		for _, l := range set {
			s := PointScore(sm, l.ModelToCam, l.Obs, DefaultPointScoreOptions()).Score
			if l.Right {
				r = append(r, s)
			} else {
				w = append(w, s)
			}
		}
		def := Separate(r, w)
		t.Logf("%s: calibrated weights: normal %.2f colour %.2f occlusion %.2f free space %.2f: AUC %.4f gap %.3f (defaults: AUC %.4f gap %.3f)",
			name, best.NormalWeight, best.ColorWeight, best.OcclusionPenalty, best.FreeSpacePenalty, sep.AUC, sep.Gap, def.AUC, def.Gap)
		if def.better(sep) {
			t.Errorf("%s: defaults separate better than the calibrated weights", name)
		}
	}
}

func benchScore(b *testing.B, point bool) {
	g, m := sceneGen(b, "valve", DefaultSceneOptions())
	sm, _ := scoreModel(b, m)
	sc, err := g.Scene(0)
	if err != nil {
		b.Fatal(err)
	}
	obs, err := ObservationFromFrame(sc.Frame)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		if point {
			PointScore(sm, sc.ModelToCam, obs, DefaultPointScoreOptions())
		} else {
			BaselineScore(sm, sc.ModelToCam, obs, DefaultBaselineOptions())
		}
	}
}

func BenchmarkBaselineScore1000(b *testing.B) { benchScore(b, false) }
func BenchmarkPointScore1000(b *testing.B)    { benchScore(b, true) }

func BenchmarkObservation640x480(b *testing.B) {
	g, _ := sceneGen(b, "valve", DefaultSceneOptions())
	sc, err := g.Scene(0)
	if err != nil {
		b.Fatal(err)
	}
	for b.Loop() {
		if _, err := ObservationFromFrame(sc.Frame); err != nil {
			b.Fatal(err)
		}
	}
}
