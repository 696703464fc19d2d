package features

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"sort"
	"testing"

	"gonum.org/v1/gonum/num/quat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
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
	pts := model.Cloud().Points
	rng := rand.New(rand.NewPCG(seed, 11))
	rd := newViewRenderers(t)
	var st recallStats
	for v := 0; v < n; v++ {
		view := renderView(t, rng, p, model.Spacing, rd)
		opt := DefaultVoteOptions()
		opt.RefineScene = view.dense
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
			t.Logf("%s view %d: wrong: error %.1f mm (%.0f%% of diameter), visibility %.2f, %d scene points, votes %.0f",
				p.name, v, e*1e3, 100*e/model.Diameter, view.visibility, len(view.scene.Points), h.Votes)
			continue
		}
		st.correct++
		dt, dr := poseError(view.truth, h.ModelToScene, p.sym, pts)
		st.dts = append(st.dts, dt)
		st.drs = append(st.drs, dr)
		if dt <= 1e-3 && dr <= 0.5*math.Pi/180 {
			st.fine++
		} else {
			t.Logf("%s view %d: refined error %.3f mm %.3f°, visibility %.2f, %d/%d scene points, ICP pairs %d rms %.4f mm",
				p.name, v, dt*1e3, dr*180/math.Pi, view.visibility, len(view.scene.Points), len(view.dense.Points), h.ICP.Pairs, h.ICP.RMS*1e3)
		}
	}
	return st
}

// recallParts returns the parts of the recall test.
func recallParts() []recallPart {
	return []recallPart{
		{name: "block", mesh: blockPart(), sym: []mesh.Pose{mesh.Identity()}},
	}
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
	for i, p := range recallParts() {
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
	_ = fmt.Sprint
}
