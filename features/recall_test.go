package features

import (
	"math"
	"math/rand/v2"
	"os"
	"sort"
	"sync"
	"testing"

	"gonum.org/v1/gonum/num/quat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
	"github.com/scanfold/scanfold/mesh/render"
)

// recallPart is a part for the recall test: its mesh, its symmetry
// rotations (identity first; one entry for an asymmetric part) and
// whether ADD-S (true) or ADD decides correctness.
type recallPart struct {
	name      string
	mesh      *mesh.Mesh
	sym       []mesh.Pose
	symmetric bool
}

// randomRotation returns a uniformly distributed rotation (Shoemake
// 1992, "Uniform random rotations", Graphics Gems III: a unit quaternion
// from three uniform numbers).
func randomRotation(rng *rand.Rand) mesh.Mat3 {
	u1, u2, u3 := rng.Float64(), rng.Float64(), rng.Float64()
	a, b := math.Sqrt(1-u1), math.Sqrt(u1)
	q := quat.Number{Real: a * math.Sin(2*math.Pi*u2), Imag: a * math.Cos(2*math.Pi*u2), Jmag: b * math.Sin(2*math.Pi*u3), Kmag: b * math.Cos(2*math.Pi*u3)}
	return mesh.RotationFromQuat(q)
}

// recallView is one rendered test view.
type recallView struct {
	truth      mesh.Pose // model to camera
	scene      *mesh.Cloud
	dense      *mesh.Cloud
	visibility float64
}

// renderView draws p under a random pose: a uniform rotation about the
// part's bounding-box centre, 0.35–0.7 m in front of the camera, the
// centre projected anywhere within the middle 80% of the image. The
// visible fraction is the part's pixels in the image over its pixels on
// a canvas three times as wide and high (the part unclipped); views
// below 30% are drawn again.
func renderView(t testing.TB, rng *rand.Rand, p recallPart, spacing float64, rd *viewRenderers) recallView {
	intr := rd.small.Intrinsics()
	centre := p.mesh.Bounds().Center()
	radius := 0.5 * p.mesh.Diameter()
	ropt := render.DefaultOptions()
	for attempt := 0; ; attempt++ {
		if attempt > 100 {
			t.Fatal("no view with 30% of the part visible")
		}
		r := randomRotation(rng)
		z := 0.35 + 0.35*rng.Float64()
		u := (0.1 + 0.8*rng.Float64()) * float64(intr.Width)
		v := (0.1 + 0.8*rng.Float64()) * float64(intr.Height)
		pos := intr.BackProject(u, v, z)
		truth := mesh.Pose{R: r, T: r3.Sub(pos, r.MulVec(centre))}
		obj := []render.Object{{Mesh: p.mesh, ModelToCam: truth, Color: mesh.RGB{R: 180, G: 180, B: 180}}}
		f, err := rd.small.Render(obj, ropt)
		if err != nil {
			t.Fatal(err)
		}
		vis := 1.0
		// The bounding sphere projects within a disc of radius about
		// f·r/(z − r) around the centre; only when that disc crosses the
		// border can the part be clipped.
		pr := intr.Fx * radius / (z - radius)
		if u-pr < 0 || v-pr < 0 || u+pr > float64(intr.Width-1) || v+pr > float64(intr.Height-1) {
			fb, err := rd.big.Render(obj, ropt)
			if err != nil {
				t.Fatal(err)
			}
			var in, all int
			for _, d := range f.Depth {
				if d > 0 {
					in++
				}
			}
			for _, d := range fb.Depth {
				if d > 0 {
					all++
				}
			}
			vis = float64(in) / float64(max(all, 1))
		}
		if vis < 0.3 {
			continue
		}
		opt := mesh.DefaultDepthCloudOptions()
		opt.Spacing = spacing
		scene, err := mesh.DepthCloud(f.Depth, intr, nil, nil, opt)
		if err != nil {
			t.Fatal(err)
		}
		opt.Spacing = spacing / 4
		dense, err := mesh.DepthCloud(f.Depth, intr, nil, nil, opt)
		if err != nil {
			t.Fatal(err)
		}
		// SCANFOLD_RECALL_EXACT_NORMALS=1 takes the scene normals from the
		// renderer's normal map instead of estimating them from depth:
		// a diagnostic that separates voting from normal estimation.
		if os.Getenv("SCANFOLD_RECALL_EXACT_NORMALS") == "1" {
			for _, c := range []*mesh.Cloud{scene, dense} {
				for i, q := range c.Points {
					u, v := intr.Project(q)
					px := int(math.Round(v))*intr.Width + int(math.Round(u))
					c.Normals[i] = r3.Vec{X: float64(f.Normal[3*px]), Y: float64(f.Normal[3*px+1]), Z: float64(f.Normal[3*px+2])}
				}
			}
		}
		return recallView{truth: truth, scene: scene, dense: dense, visibility: vis}
	}
}

// viewRenderers holds a renderer for the 640×480 view and one for a
// canvas three times as wide and high around it (same focal length).
type viewRenderers struct{ small, big *render.Renderer }

func newViewRenderers(t testing.TB) *viewRenderers {
	intr := mesh.DefaultIntrinsics()
	big := intr
	big.Width, big.Height = 3*intr.Width, 3*intr.Height
	big.Cx, big.Cy = intr.Cx+float64(intr.Width), intr.Cy+float64(intr.Height)
	s, err := render.NewRenderer(intr)
	if err != nil {
		t.Fatal(err)
	}
	b, err := render.NewRenderer(big)
	if err != nil {
		t.Fatal(err)
	}
	return &viewRenderers{small: s, big: b}
}

// poseError returns the translation (metres) and rotation (radians)
// error of est against the nearest symmetric equivalent truth·S.
func poseError(truth, est mesh.Pose, sym []mesh.Pose, pts []r3.Vec) (dt, dr float64) {
	best := math.Inf(1)
	for _, s := range sym {
		eq := truth.Mul(s)
		if e := addErr(pts, eq, est); e < best {
			best = e
			dt = r3.Norm(r3.Sub(eq.T, est.T))
			dr = mesh.RotationAngle(eq, est)
		}
	}
	return dt, dr
}

type recallStats struct {
	views, correct, fine int
	dts, drs             []float64
	errs                 []float64
}

func percentile(xs []float64, p float64) float64 {
	if len(xs) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	return s[min(len(s)-1, int(p*float64(len(s))))]
}

// runRecall votes in n rendered views of p and collects the figures.
func runRecall(t *testing.T, p recallPart, n int, seed uint64) recallStats {
	model := modelOf(t, p.mesh)
	// Error metrics on a dense sample (1 mm): ADD-S on the sparse table
	// cloud would have a floor of about half its spacing once the
	// estimate is a symmetric equivalent, since its points need not map
	// onto each other.
	so := mesh.DefaultSampleOptions()
	so.Spacing = 0.001
	dense, _, err := mesh.Sample(p.mesh, so)
	if err != nil {
		t.Fatal(err)
	}
	pts := dense.Points
	// The refinement moves a sample at half the model spacing.
	so.Spacing = model.Spacing / 2
	refineModel, _, err := mesh.Sample(p.mesh, so)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 11))
	rd := newViewRenderers(t)
	var st recallStats
	for v := 0; v < n; v++ {
		view := renderView(t, rng, p, model.Spacing, rd)
		opt := DefaultVoteOptions()
		opt.RefineScene = view.dense
		opt.RefineModel = refineModel

		hyps, err := Vote(model, view.scene, opt)
		if err != nil {
			t.Fatal(err)
		}
		st.views++
		if len(hyps) == 0 {
			t.Logf("%s view %d: no hypothesis (%d scene points)", p.name, v, len(view.scene.Points))
			continue
		}
		h := hyps[0]
		var e float64
		if p.symmetric {
			e = addsErr(pts, view.truth, h.ModelToScene)
		} else {
			e = addErr(pts, view.truth, h.ModelToScene)
		}
		st.errs = append(st.errs, e)
		if e >= 0.1*model.Diameter {
			for k, hk := range hyps {
				ek := addsErr(pts, view.truth, hk.ModelToScene)
				iou, agree := depthAgreement(t, rd, p.mesh, view.truth, hk.ModelToScene)
				t.Logf("   #%d votes %.0f support %d members %d err %.1f mm icp pairs %d inl %.2f rms %.3f  silhouette IoU %.3f depth agree %.3f", k, hk.Votes, hk.Support, hk.Members, ek*1e3, hk.ICP.Pairs, hk.ICP.InlierRatio, hk.ICP.RMS*1e3, iou, agree)
			}
			rel := view.truth.Inv().Mul(h.ModelToScene)
			ax, an := rel.AxisAngle()
			t.Logf("   rel: axis %.3f angle %.1f° T %.4f; view dir in model %.3f", ax, an*180/math.Pi, rel.T, view.truth.Inv().Rotate(r3.Vec{Z: 1}))
			t.Logf("%s view %d: wrong: error %.1f mm (%.0f%% of diameter), visibility %.2f, %d scene points, votes %.0f",
				p.name, v, e*1e3, 100*e/model.Diameter, view.visibility, len(view.scene.Points), h.Votes)
			continue
		}
		st.correct++
		// The nearest equivalent is chosen on the table cloud (a few
		// hundred points): the dense sample would cost 3600 × its size
		// per view for the bushing's sampled revolution.
		dt, dr := poseError(view.truth, h.ModelToScene, p.sym, model.Cloud().Points)
		st.dts = append(st.dts, dt)
		st.drs = append(st.drs, dr)
		if dt <= 1e-3 && dr <= 0.5*math.Pi/180 {
			st.fine++
		} else {
			t.Logf("%s view %d: refined error %.3f mm %.3f°, visibility %.2f, %d/%d scene points, ICP pairs %d rms %.4f mm it %d conv %v",
				p.name, v, dt*1e3, dr*180/math.Pi, view.visibility, len(view.scene.Points), len(view.dense.Points), h.ICP.Pairs, h.ICP.RMS*1e3, h.ICP.Iterations, h.ICP.Converged)
		}
	}
	return st
}

// partMeshes caches the demo parts' meshes: each part's SDF sampled on
// a 1 mm grid over its bounds and extracted by marching cubes.
var partMeshes sync.Map

func partMesh(t testing.TB, name string) (*mesh.Mesh, *parts.Part) {
	p, err := parts.Get(name)
	if err != nil {
		t.Fatal(err)
	}
	if m, ok := partMeshes.Load(name); ok {
		return m.(*mesh.Mesh), p
	}
	b := p.Bounds(0.002)
	g, err := mesh.SampleGrid(p.SDF, p.Color, b.Min, b.Max, 0.001)
	if err != nil {
		t.Fatal(err)
	}
	m, err := mesh.MarchingCubes(g, 0)
	if err != nil {
		t.Fatal(err)
	}
	partMeshes.Store(name, m)
	return m, p
}

// recallParts returns the demo parts with their symmetries (a solid of
// revolution sampled every 0.1°, finer than the 0.5° target).
func recallParts(t testing.TB) []recallPart {
	var out []recallPart
	for _, name := range parts.Names() {
		m, p := partMesh(t, name)
		sym := p.Symmetry.Rotations(3600)
		out = append(out, recallPart{name: name, mesh: m, sym: sym, symmetric: len(sym) > 1})
	}
	return out
}

// TestRecallOnRenders renders each part in random views (uniform
// rotations, at least 30% visible), votes with the default options,
// refines against the dense scene, and checks the top hypothesis by ADD
// (ADD-S for symmetric parts) < 10% of the diameter (Hinterstoisser et
// al. 2012, ACCV). Target: ≥ 97% of views correct; correct views
// refined to within 1 mm and 0.5° of the truth (or of its nearest
// symmetric equivalent) on these noise-free renders.
//
// The default run uses 3 views per part. The full run (100 views per
// part, several minutes) needs SCANFOLD_RECALL_FULL=1 and no -short.
func TestRecallOnRenders(t *testing.T) {
	n := 3
	if os.Getenv("SCANFOLD_RECALL_FULL") == "1" && !testing.Short() {
		n = 100
	}
	for i, p := range recallParts(t) {
		t.Run(p.name, func(t *testing.T) {
			st := runRecall(t, p, n, uint64(1000+i))
			rate := float64(st.correct) / float64(st.views)
			t.Logf("%s: %d/%d correct (%.1f%%), %d within 1 mm and 0.5°; ADD(-S) median %.2f mm; refined error median %.3f mm %.3f°, 95th %.3f mm %.3f°",
				p.name, st.correct, st.views, 100*rate, st.fine,
				percentile(st.errs, 0.5)*1e3,
				percentile(st.dts, 0.5)*1e3, percentile(st.drs, 0.5)*180/math.Pi,
				percentile(st.dts, 0.95)*1e3, percentile(st.drs, 0.95)*180/math.Pi)
			if n >= 100 && rate < 0.97 {
				t.Errorf("%s: recall %.1f%%, target ≥ 97%%", p.name, 100*rate)
			}
			if n < 100 && st.correct < n-1 {
				t.Errorf("%s: %d of %d views correct", p.name, st.correct, n)
			}
			if st.fine < st.correct {
				t.Errorf("%s: %d of %d correct views refined within 1 mm and 0.5°", p.name, st.fine, st.correct)
			}
		})
	}
}

func depthAgreement(t testing.TB, rd *viewRenderers, m *mesh.Mesh, a, b mesh.Pose) (iou, agree float64) {
	fa, err := rd.small.Render([]render.Object{{Mesh: m, ModelToCam: a}}, render.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	da := append([]float32(nil), fa.Depth...)
	fb, err := rd.small.Render([]render.Object{{Mesh: m, ModelToCam: b}}, render.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	var inter, union, ok int
	for i, x := range da {
		y := fb.Depth[i]
		if x > 0 || y > 0 {
			union++
		}
		if x > 0 && y > 0 {
			inter++
			if math.Abs(float64(x-y)) < 0.002 {
				ok++
			}
		}
	}
	return float64(inter) / float64(max(union, 1)), float64(ok) / float64(max(union, 1))
}

// TestSymmetricPartsGiveEquivalentPoses votes for the nut and the
// bushing in a scene that shows the whole part (a second, independently
// seeded sample of its surface under a random pose), so that every
// symmetric equivalent is equally supported. The nut's geometry is
// six-fold about its axis and the same turned over (the parts package
// declares it: 12 proper rotations), so its 12 best hypotheses must be
// its 12 equivalent poses, each near a different truth·S. The bushing
// is a solid of revolution without a flip: every hypothesis must share
// the true axis (ADD-S correct) while the hypotheses differ from each
// other by at least the clustering angle about it: the symmetry shows
// as several top poses, not one.
func TestSymmetricPartsGiveEquivalentPoses(t *testing.T) {
	rng := rand.New(rand.NewPCG(77, 78))
	for _, tc := range []struct {
		name string
		want int
	}{{"nut", 12}, {"bushing", 10}} {
		t.Run(tc.name, func(t *testing.T) {
			m, p := partMesh(t, tc.name)
			model := modelOf(t, m)
			truth := mesh.Pose{R: randomRotation(rng), T: r3.Vec{X: 0.01, Y: -0.02, Z: 0.5}}
			so := mesh.DefaultSampleOptions()
			so.Spacing = model.Spacing
			so.Seed = 99
			scene, _, err := mesh.Sample(m.Transform(truth), so)
			if err != nil {
				t.Fatal(err)
			}
			so.Spacing = model.Spacing / 4
			dense, _, err := mesh.Sample(m.Transform(truth), so)
			if err != nil {
				t.Fatal(err)
			}
			so.Spacing = 0.001
			fine, _, err := mesh.Sample(m, so)
			if err != nil {
				t.Fatal(err)
			}
			opt := DefaultVoteOptions()
			opt.MaxHypotheses = tc.want
			opt.RefineScene = dense
			hyps, err := Vote(model, scene, opt)
			if err != nil {
				t.Fatal(err)
			}
			if len(hyps) < tc.want {
				t.Fatalf("%d hypotheses, want %d", len(hyps), tc.want)
			}
			sym := p.Symmetry.Rotations(360)
			axis := p.Symmetry.Axis
			used := map[int]int{}
			for k, h := range hyps {
				e := addsErr(fine.Points, truth, h.ModelToScene)
				// The equivalent it is nearest to (by ADD).
				best, bi := math.Inf(1), -1
				for i, s := range sym {
					if d := addErr(fine.Points, truth.Mul(s), h.ModelToScene); d < best {
						best, bi = d, i
					}
				}
				axisErr := math.Acos(math.Min(1, r3.Dot(truth.Rotate(axis), h.ModelToScene.Rotate(axis))))
				t.Logf("#%d votes %.0f: ADD-S %.2f mm, nearest equivalent %d at ADD %.2f mm, axis off by %.2f°",
					k, h.Votes, e*1e3, bi, best*1e3, axisErr*180/math.Pi)
				if e >= 0.1*model.Diameter {
					t.Errorf("#%d is not an equivalent pose (ADD-S %.1f mm)", k, e*1e3)
				}
				if tc.name == "nut" {
					// Tolerance: a refined equivalent pose lands on its
					// symmetric counterpart to well under a millimetre
					// (noise-free samples); 1 mm separates the 12, which
					// are at least 60° apart (≥ 12 mm at the corners).
					if best > 1e-3 {
						t.Errorf("#%d is %.2f mm (ADD) from the nearest equivalent", k, best*1e3)
					}
					if prev, ok := used[bi]; ok {
						t.Errorf("#%d and #%d are the same equivalent pose %d", prev, k, bi)
					}
					used[bi] = k
				} else if axisErr > 2*math.Pi/180 {
					t.Errorf("#%d: axis %.2f° off", k, axisErr*180/math.Pi)
				}
			}
			if tc.name == "bushing" {
				for i := range hyps {
					for j := i + 1; j < len(hyps); j++ {
						if a := mesh.RotationAngle(hyps[i].ModelToScene, hyps[j].ModelToScene); a < opt.ClusterAngle*0.5 {
							t.Errorf("#%d and #%d only %.1f° apart", i, j, a*180/math.Pi)
						}
					}
				}
			}
		})
	}
}
