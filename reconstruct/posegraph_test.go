package reconstruct

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/optimize"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// ringPoses returns n cameras on a circle of radius 0.5 m about the
// origin, each looking at it: a handheld sweep's loop.
func ringPoses(t *testing.T, n int) []mesh.Pose {
	t.Helper()
	out := make([]mesh.Pose, n)
	for k := range out {
		a := 2 * math.Pi * float64(k) / float64(n)
		eye := r3.Vec{X: 0.5 * math.Cos(a), Y: 0.5 * math.Sin(a), Z: 0.3}
		p, err := mesh.LookAt(eye, r3.Vec{}, r3.Vec{Z: 1})
		if err != nil {
			t.Fatal(err)
		}
		out[k] = p
	}
	return out
}

// smallMotion returns a random motion of up to shift metres and turn
// radians.
func smallMotion(rng *rand.Rand, shift, turn float64) mesh.Pose {
	axis := r3.Vec{X: rng.NormFloat64(), Y: rng.NormFloat64(), Z: rng.NormFloat64()}
	d := r3.Vec{X: rng.Float64() - 0.5, Y: rng.Float64() - 0.5, Z: rng.Float64() - 0.5}
	return mesh.Pose{R: mesh.RotationFromAxisAngle(axis, turn*rng.Float64()), T: r3.Scale(2*shift, d)}
}

// ringGraph builds a graph over truth: consecutive nodes tied by
// odometry edges and the last to the first by a registration, each
// measurement disturbed by noise(), with the information of a
// well-spread registration (translation 1/(1 mm)², rotation
// 1/(0.05°)²); the nodes start at the chained odometry, as tracking
// leaves them.
func ringGraph(truth []mesh.Pose, noise func() mesh.Pose) *poseGraph {
	var info [6][6]float64
	for u := 0; u < 3; u++ {
		info[u][u] = 1 / math.Pow(0.05*math.Pi/180, 2)
		info[u+3][u+3] = 1 / (0.001 * 0.001)
	}
	n := len(truth)
	g := &poseGraph{nodes: make([]graphNode, n)}
	for k := 0; k < n; k++ {
		g.nodes[k].placed = 5 * k
	}
	g.nodes[0].pose = truth[0]
	for k := 0; k+1 < n; k++ {
		z := truth[k].Inv().Mul(truth[k+1]).Mul(noise())
		g.edges = append(g.edges, graphEdge{i: k, j: k + 1, z: z, info: info, odometry: true})
		g.nodes[k+1].pose = g.nodes[k].pose.Mul(z)
	}
	loop := truth[n-1].Inv().Mul(truth[0]).Mul(noise())
	g.edges = append(g.edges, graphEdge{i: n - 1, j: 0, z: loop, info: info})
	return g
}

func poseDistance(a, b mesh.Pose) (shift, turn float64) {
	return r3.Norm(r3.Sub(a.T, b.T)), mesh.RotationAngle(a, b)
}

func TestPoseGraphExactEdgesRecoverTruth(t *testing.T) {
	truth := ringPoses(t, 12)
	rng := rand.New(rand.NewPCG(1, 2))
	g := ringGraph(truth, func() mesh.Pose { return mesh.Identity() })
	// Start every node but the first (fixed) up to 5 mm / 1° off, the
	// drift tracking leaves.
	for k := 1; k < len(g.nodes); k++ {
		g.nodes[k].pose = smallMotion(rng, 0.005, math.Pi/180).Mul(truth[k])
	}
	poses, err := g.solve(10)
	if err != nil {
		t.Fatal(err)
	}
	for k := range poses {
		// Consistent edges: the optimum is the truth; Gauss–Newton on
		// small motions converges to rounding (1 µm / 1e−5° is far
		// below anything the sensor sees).
		if s, a := poseDistance(poses[k], truth[k]); s > 1e-6 || a > 1e-7 {
			t.Errorf("node %d: %.3g m / %.3g rad from truth", k, s, a)
		}
	}
}

// TestPoseGraphMatchesGeneralMinimiser checks the Gauss–Newton solution
// of a noisy ring against gonum's BFGS minimiser (with finite-difference
// gradients) run on the same cost from the same start: an independent
// optimiser must reach the same minimum.
func TestPoseGraphMatchesGeneralMinimiser(t *testing.T) {
	truth := ringPoses(t, 6)
	rng := rand.New(rand.NewPCG(3, 4))
	g := ringGraph(truth, func() mesh.Pose { return smallMotion(rng, 0.001, 0.2*math.Pi/180) })
	poses, err := g.solve(20)
	if err != nil {
		t.Fatal(err)
	}
	start := make([]mesh.Pose, len(g.nodes))
	for k := range g.nodes {
		start[k] = g.nodes[k].pose
	}
	at := func(x []float64, k int) mesh.Pose {
		if k == 0 {
			return start[0]
		}
		var d [6]float64
		copy(d[:], x[6*(k-1):6*k])
		// Scale the translation so both kinds of unknown are of a size
		// (1 unit = 1 mm, 1 unit = 1 mrad), which BFGS needs.
		for u := 3; u < 6; u++ {
			d[u] *= 1e-3
		}
		for u := 0; u < 3; u++ {
			d[u] *= 1e-3
		}
		return expTwist(d).Mul(start[k])
	}
	cost := func(x []float64) float64 {
		c := 0.0
		for _, e := range g.edges {
			r := twist(at(x, e.i).Mul(e.z).Mul(at(x, e.j).Inv()))
			for u := 0; u < 6; u++ {
				for v := 0; v < 6; v++ {
					c += 0.5 * r[u] * e.info[u][v] * r[v]
				}
			}
		}
		return c
	}
	p := optimize.Problem{
		Func: cost,
		Grad: func(grad, x []float64) { fd.Gradient(grad, cost, x, &fd.Settings{Formula: fd.Central}) },
	}
	x0 := make([]float64, 6*(len(g.nodes)-1))
	res, err := optimize.Minimize(p, x0, &optimize.Settings{GradientThreshold: 1e-8}, &optimize.BFGS{})
	if res == nil {
		t.Fatalf("gonum BFGS: %v", err)
	}
	// A line search that stalls at the minimum (finite-difference
	// gradients are noisy there) still leaves res at the best point; the
	// comparison below is the test.
	t.Logf("BFGS: %v after %d evaluations, cost %.6g", err, res.Stats.FuncEvaluations, res.F)
	if cg, cb := cost(poseOffsets(start, poses)), res.F; cg > cb*(1+1e-6)+1e-9 {
		t.Errorf("Gauss–Newton cost %.9g above BFGS's %.9g", cg, cb)
	}
	for k := range poses {
		// Both minimise the same smooth cost; they agree to the BFGS
		// stopping tolerance (a micrometre is a thousandth of the noise
		// put on the edges).
		if s, a := poseDistance(poses[k], at(res.X, k)); s > 1e-6 || a > 1e-5 {
			t.Errorf("node %d: Gauss–Newton and BFGS %.3g m / %.3g rad apart", k, s, a)
		}
	}
}

// poseOffsets returns x for the cost in TestPoseGraphMatchesGeneralMinimiser
// that moves start to poses (in its mm / mrad units).
func poseOffsets(start, poses []mesh.Pose) []float64 {
	x := make([]float64, 6*(len(start)-1))
	for k := 1; k < len(start); k++ {
		d := twist(poses[k].Mul(start[k].Inv()))
		for u := range d {
			x[6*(k-1)+u] = d[u] * 1e3
		}
	}
	return x
}

// TestPoseGraphSpreadsLoopError: with odometry edges that all carry the
// same small bias and an exact loop edge, the least-squares solution
// spreads the loop's misclosure over the edges of the loop (with equal
// weights and a linear problem each of n edges gives up 1/n of it, a
// property of least squares on a cycle; from memory), so the worst
// node error falls well below the chain's drift. The bias here is a
// turn, whose effect on positions grows along the chain, so the test
// asks for less than half, not for the linear case's exact split.
func TestPoseGraphSpreadsLoopError(t *testing.T) {
	truth := ringPoses(t, 12)
	// 0.05° of yaw (about the camera's y axis, the ring's up) too much
	// on every edge: the chain's end turns 0.55° and, half a metre from
	// the centre, lands millimetres off.
	bias := mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Y: 1}, 0.05*math.Pi/180)}
	g := ringGraph(truth, func() mesh.Pose { return bias })
	var before float64
	for k := range g.nodes {
		s, _ := poseDistance(g.nodes[k].pose, truth[k])
		before = math.Max(before, s)
	}
	g.edges[len(g.edges)-1].z = truth[len(truth)-1].Inv().Mul(truth[0])
	poses, err := g.solve(10)
	if err != nil {
		t.Fatal(err)
	}
	var after float64
	for k := range poses {
		s, _ := poseDistance(poses[k], truth[k])
		after = math.Max(after, s)
	}
	// Spread over the loop, the worst error must fall to well under half
	// the chain's (measured 4.45 → 1.63 mm).
	if before < 0.002 || after > before/2 {
		t.Errorf("worst node error %.2f mm before, %.2f mm after (want > 2, under half)", before*1000, after*1000)
	}
}

func TestPoseGraphDropsWrongRegistration(t *testing.T) {
	truth := ringPoses(t, 12)
	g := ringGraph(truth, func() mesh.Pose { return mesh.Identity() })
	// A registration between nodes 3 and 9 that is 12 mm off (within
	// the 15 mm a registration may move): it cannot agree with the rest
	// and must go. Left in, it would pull the ring three quarters of the
	// way toward it (two parallel chains of six equal edges against one)
	// and keep a residual of 3 mm.
	info := g.edges[0].info
	wrong := truth[3].Inv().Mul(truth[9]).Mul(mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Y: 0.012}})
	g.edges = append(g.edges, graphEdge{i: 3, j: 9, z: wrong, info: info})
	poses, dropped, err := g.optimise(DefaultLoopOptions())
	if err != nil {
		t.Fatal(err)
	}
	if dropped != 1 {
		t.Errorf("%d edges dropped, want 1", dropped)
	}
	for k := range poses {
		if s, a := poseDistance(poses[k], truth[k]); s > 1e-6 || a > 1e-7 {
			t.Errorf("node %d: %.3g m / %.3g rad from truth", k, s, a)
		}
	}
}

func TestPoseGraphDisconnected(t *testing.T) {
	truth := ringPoses(t, 4)
	g := ringGraph(truth, func() mesh.Pose { return mesh.Identity() })
	g.edges = g.edges[:1] // node 2 and 3 tied to nothing
	if _, err := g.solve(5); err == nil {
		t.Error("a graph with unlinked nodes solved without an error")
	}
}

func TestCorrectPosesInterpolates(t *testing.T) {
	nodes := []graphNode{{placed: 0, pose: mesh.Identity()}, {placed: 4, pose: mesh.Identity()}}
	shift := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: 0.004}}
	newNode := []mesh.Pose{mesh.Identity(), shift}
	poses := make([]mesh.Pose, 7)
	for k := range poses {
		poses[k] = mesh.Identity()
	}
	// Frame k of 0..4 moves k/4 of node 1's 4 mm; frames after the last
	// node move with it. A negative span counts as 0.
	want := []float64{0, 1, 2, 3, 4, 4, 4}
	for _, span := range []int{0, -1} {
		for k, p := range correctPoses(poses, nodes, newNode, span) {
			if math.Abs(p.T.X*1000-want[k]) > 1e-9 || p.T.Y != 0 || p.T.Z != 0 {
				t.Errorf("span %d: frame %d moved to %v mm, want %.0f along x", span, k, r3.Scale(1000, p.T), want[k])
			}
		}
	}
}

// TestCorrectPosesDrift checks DriftSpan's split of the nodes'
// corrections: node frames keep their own, the frames between nodes
// take the corrections averaged with weights span+1−|d| (worked by hand
// below), and a drift linear in the node index passes the average
// unchanged away from the ends (a symmetric kernel keeps straight lines).
func TestCorrectPosesDrift(t *testing.T) {
	move := func(mm float64) mesh.Pose { return mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: mm / 1000}} }
	// Nodes at frames 0, 2, 4; only node 1's own error moves it (2 mm).
	nodes := []graphNode{{placed: 0, pose: mesh.Identity()}, {placed: 2, pose: mesh.Identity()}, {placed: 4, pose: mesh.Identity()}}
	newNode := []mesh.Pose{move(0), move(2), move(0)}
	poses := make([]mesh.Pose, 6)
	for k := range poses {
		poses[k] = mesh.Identity()
	}
	// span 1: node 0 averages (2·0 + 1·2)/3, node 1 (0 + 2·2 + 0)/4,
	// node 2 (2 + 2·0)/3; frame 1 halfway between the first two
	// averages, frame 2 its own 2 mm, frame 5 after the last node node
	// 2's average.
	want := []float64{0, (2.0/3 + 1) / 2, 2, (1 + 2.0/3) / 2, 0, 2.0 / 3}
	for k, p := range correctPoses(poses, nodes, newNode, 1) {
		if math.Abs(p.T.X*1000-want[k]) > 1e-9 || p.T.Y != 0 || p.T.Z != 0 {
			t.Errorf("span 1: frame %d moved to %v mm, want %.4f along x", k, r3.Scale(1000, p.T), want[k])
		}
	}
	// A drift of 1 mm a node, nodes every 3 frames: with span 2 the
	// frames whose nodes lie 2 or more from either end move by the drift
	// interpolated, 1/3 mm a frame.
	nodes = nodes[:0]
	newNode = newNode[:0]
	for k := 0; k < 8; k++ {
		nodes = append(nodes, graphNode{placed: 3 * k, pose: mesh.Identity()})
		newNode = append(newNode, move(float64(k)))
	}
	poses = make([]mesh.Pose, 22)
	for k := range poses {
		poses[k] = mesh.Identity()
	}
	got := correctPoses(poses, nodes, newNode, 2)
	for f := 6; f <= 15; f++ {
		if w := float64(f) / 3; math.Abs(got[f].T.X*1000-w) > 1e-9 {
			t.Errorf("linear drift: frame %d moved %.6f mm, want %.6f", f, got[f].T.X*1000, w)
		}
	}
}

// TestFuseHandheldWorkers checks that a tracked handheld sweep, pose
// graph included, comes out the same to the bit whatever the number of
// goroutines (each registration runs on its own tracker; sums merge in
// a fixed order), and whether the part is fused from the regions of the
// frames kept in memory or from the frames decoded again.
func TestFuseHandheldWorkers(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	dir := synthSweep(t, "valve", halfSizeHandheld(40))
	sw, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	type run struct {
		name    string
		workers int
		keep    int64
	}
	var results []*FuseResult
	// one run changes both: either would show
	runs := []run{{"1 worker", 1, 256 << 20}, {"3 workers, frames decoded again", 3, 0}}
	for _, r := range runs {
		fo := DefaultFuseOptions()
		fo.Track.Workers, fo.TSDF.Workers = r.workers, r.workers
		fo.KeepBytes = r.keep
		res, err := Fuse(context.Background(), sw, fo)
		if err != nil {
			t.Fatal(err)
		}
		results = append(results, res)
	}
	if results[0].Report.GraphEdges == 0 {
		t.Fatalf("no pose graph (%d nodes): the test needs one", results[0].Report.GraphNodes)
	}
	a := results[0]
	for k, b := range results[1:] {
		name := runs[k+1].name
		ra, rb := a.Report, b.Report
		if ra.GraphEdges != rb.GraphEdges || ra.GraphDropped != rb.GraphDropped {
			t.Errorf("%s: %d edges, %d dropped; with 1 worker %d, %d", name, rb.GraphEdges, rb.GraphDropped, ra.GraphEdges, ra.GraphDropped)
		}
		for i := range ra.CamToWorld {
			if ra.CamToWorld[i] != rb.CamToWorld[i] {
				t.Errorf("%s: frame %d placed differently", name, i)
			}
		}
		if len(a.Mesh.Vertices) != len(b.Mesh.Vertices) || len(a.Mesh.Faces) != len(b.Mesh.Faces) {
			t.Errorf("%s: %d vertices, %d faces; with 1 worker %d, %d", name, len(b.Mesh.Vertices), len(b.Mesh.Faces), len(a.Mesh.Vertices), len(a.Mesh.Faces))
			continue
		}
		for i := range a.Mesh.Vertices {
			if a.Mesh.Vertices[i] != b.Mesh.Vertices[i] {
				t.Errorf("%s: vertex %d at %v, with 1 worker %v", name, i, b.Mesh.Vertices[i], a.Mesh.Vertices[i])
				break
			}
		}
	}
}

// TestROIMoved checks the bound on how far the region of interest moves
// under a pose correction: a shift moves it by the shift; a turn about
// a line through its centre by at most the turn times its reach.
func TestROIMoved(t *testing.T) {
	f := &fuser{roi: ROI{Plane: Plane{Normal: r3.Vec{Z: 1}}, Centre: r3.Vec{X: 0.1, Y: 0.2, Z: 0.05}, Radius: 0.06, Top: 0.1}}
	before := mesh.Identity()
	shift := mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: 0.003, Y: -0.004}}
	if got := f.roiMoved(before, shift); math.Abs(got-0.005) > 1e-12 {
		t.Errorf("a 5 mm shift moved the region %.6f m", got)
	}
	// 0.5° about the vertical through the centre: the centre stays, the
	// rim (6 cm out) moves 0.52 mm; the bound, reach 0.21 m, says 1.83 mm.
	turn := 0.5 * math.Pi / 180
	r := mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, turn)
	about := mesh.Pose{R: r, T: r3.Sub(f.roi.Centre, r.MulVec(f.roi.Centre))}
	got := f.roiMoved(before, about)
	if want := turn * 0.21; math.Abs(got-want) > 1e-9 {
		t.Errorf("a 0.5° turn about the centre: bound %.6f m, want %.6f", got, want)
	}
	if rim := turn * 0.06; got < rim {
		t.Errorf("bound %.6f m below the rim's move %.6f", got, rim)
	}
}

// TestNodeModelRoundTrip checks that a model map kept compactly
// (compactModel) and rebuilt (expand) gives back the raycast's points
// and normals: the depth along each pixel's ray and the normal in
// float32 lose at most a few 1e−8 m at half a metre, so 1 µm and 1e−6
// are generous; rebuilt at a moved pose, the map moves rigidly with it.
func TestNodeModelRoundTrip(t *testing.T) {
	c := r3.Vec{Z: 0.5}
	vol := fuseSphere(t, DefaultTSDFOptions(), c, 0.04, orbitPoses(t, 8, c, 0.45, 0.3))
	view := orbitPoses(t, 3, c, 0.45, -0.2)[1]
	m := vol.Raycast(context.Background(), testIntr, view, nil)
	moved := mesh.PoseFromAxisAngle(r3.Vec{X: 1, Y: -1, Z: 2}, 0.01, r3.Vec{X: 0.003, Y: 0.001, Z: -0.002})
	nm := compactModel(m, view)
	same := nm.expand(view, nil)
	shifted := nm.expand(moved.Mul(view), nil)
	hits := 0
	for i := range m.Points {
		if !m.Valid(i) {
			if same.Valid(i) {
				t.Fatalf("pixel %d: no surface in the raycast, one after the round trip", i)
			}
			continue
		}
		hits++
		if d := r3.Norm(r3.Sub(same.Points[i], m.Points[i])); d > 1e-6 {
			t.Fatalf("pixel %d: point %.3g m off after the round trip", i, d)
		}
		if d := r3.Norm(r3.Sub(same.Normals[i], m.Normals[i])); d > 1e-6 {
			t.Fatalf("pixel %d: normal %.3g off after the round trip", i, d)
		}
		if d := r3.Norm(r3.Sub(shifted.Points[i], moved.Apply(m.Points[i]))); d > 1e-6 {
			t.Fatalf("pixel %d: point %.3g m off the rigidly moved map", i, d)
		}
		if d := r3.Norm(r3.Sub(shifted.Normals[i], moved.Rotate(m.Normals[i]))); d > 1e-6 {
			t.Fatalf("pixel %d: normal %.3g off the rigidly moved map", i, d)
		}
	}
	if hits == 0 {
		t.Fatal("the raycast hit nothing")
	}
}

// truePoseNodes renders a half-size handheld sweep of part and makes
// every every-th frame a pose graph node at its true pose, each with
// the scene volume's raycast after its frame was fused, its depth
// filtered as tracking filters it, and its luminance; it returns the
// nodes and their frames.
func truePoseNodes(t *testing.T, part string, frames, every int) ([]graphNode, []*Frame, mesh.Intrinsics) {
	t.Helper()
	dir := synthSweep(t, part, halfSizeHandheld(frames))
	sw, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	tp, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	opt := DefaultFuseOptions()
	scene, err := NewVolume(opt.sceneTSDF())
	if err != nil {
		t.Fatal(err)
	}
	var intr mesh.Intrinsics
	var tr *Tracker
	f := &fuser{opt: opt}
	var nodes []graphNode
	var nodeFrames []*Frame
	for _, idx := range sw.Usable() {
		fr, err := sw.Frame(idx)
		if err != nil {
			t.Fatal(err)
		}
		if tr == nil {
			intr = fr.Intr
			if tr, err = NewTracker(scene, intr, opt.Track); err != nil {
				t.Fatal(err)
			}
		}
		pose := tp.CamToWorld[idx]
		if err := f.integrateScene(ctx, scene, fr, pose); err != nil {
			t.Fatal(err)
		}
		if idx%every != 0 {
			continue
		}
		tr.UpdateModel(ctx, pose)
		tdepth := make([]float32, len(fr.Depth))
		bilateralDepth(fr.Depth, tdepth, make([]float32, len(fr.Depth)), intr.Width, intr.Height, opt.Track.DepthFilter, 0)
		nodes = append(nodes, graphNode{placed: idx, pose: pose, depth: fr.Depth, tdepth: tdepth,
			lum: Luminance(fr.Color, nil), model: compactModel(tr.model, pose)})
		nodeFrames = append(nodeFrames, fr)
	}
	return nodes, nodeFrames, intr
}

// TestFrameCacheRegistrations checks that registrations through a
// frameCache (frames prepared once and reused, evicted when it is full)
// give the same edges, to the bit, as TrackColor preparing every frame
// anew: on the nodes of a half-size handheld sweep, each with the scene
// volume's raycast after its frame was fused at its true pose, a cache
// of two frames for up to four earlier nodes a later node.
func TestFrameCacheRegistrations(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	nodes, _, intr := truePoseNodes(t, "bracket", 30, 3)
	ctx := context.Background()
	opt := DefaultFuseOptions()
	topt := opt.Track
	topt.DepthFilter = 0
	cached, err := NewTracker(nil, intr, topt)
	if err != nil {
		t.Fatal(err)
	}
	plain, err := NewTracker(nil, intr, topt)
	if err != nil {
		t.Fatal(err)
	}
	frames := &frameCache{size: 2}
	lo := opt.Loop
	lo.MinPairs = 500 // a quarter of the full-size images' 2000
	pairs, hits := 0, 0
	for j := range nodes {
		cached.useNode(&nodes[j])
		plain.useNode(&nodes[j])
		for i := max(0, j-4); i < j; i++ {
			a, b := &nodes[j], &nodes[i]
			before := len(frames.frames)
			inCache := false
			for _, p := range frames.frames {
				inCache = inCache || p.node == i
			}
			got, gotOK, err := cached.registerWith(ctx, a, b, i, frames, lo)
			if err != nil {
				t.Fatal(err)
			}
			if inCache {
				hits++
			} else if len(frames.frames) == before && before < frames.size {
				t.Fatalf("pair %d–%d: a new frame was not cached", i, j)
			}
			res, err := plain.TrackColor(ctx, b.tdepth, b.lum, nil, b.pose)
			if err != nil {
				t.Fatal(err)
			}
			moved := b.pose.Inv().Mul(res.CamToWorld)
			wantOK := !res.Lost && res.Pairs >= lo.MinPairs &&
				r3.Norm(moved.T) <= lo.MaxShift && mesh.RotationAngle(moved, mesh.Identity()) <= lo.MaxTurn
			if gotOK != wantOK {
				t.Fatalf("pair %d–%d: registered %v through the cache, %v anew", i, j, gotOK, wantOK)
			}
			if !gotOK {
				continue
			}
			pairs++
			if want := a.pose.Inv().Mul(res.CamToWorld); got.z != want || got.info != res.system.Normal() {
				t.Fatalf("pair %d–%d: edge %v through the cache, %v anew", i, j, got.z, a.pose.Inv().Mul(res.CamToWorld))
			}
		}
	}
	if pairs < 10 || hits < 5 {
		t.Fatalf("%d pairs registered, %d cache hits: the test needs more", pairs, hits)
	}
	t.Logf("%d pairs, %d cache hits", pairs, hits)
}

// TestHandedFrames checks that a node's frame as tracking prepares it
// (a tracker with the depth filter, one worker, as Fuse prepares frames
// ahead), copied by snapshotPrepared, is what a registration prepares
// anew from the node's filtered depth and luminance (a tracker without
// the filter, whose keyframe is set), to the bit, and that a
// registration through the handed frame gives the same edge.
func TestHandedFrames(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	nodes, frames, intr := truePoseNodes(t, "nut", 12, 2)
	ctx := context.Background()
	opt := DefaultFuseOptions()
	var snaps []*preparedFrame
	for k, fr := range frames {
		topt := opt.Track
		topt.Workers = 1
		ahead, err := NewTracker(nil, intr, topt)
		if err != nil {
			t.Fatal(err)
		}
		ahead.prepareColour(fr.Depth, nodes[k].lum, nil, true)
		if !slices.Equal(ahead.filteredDepth(), nodes[k].tdepth) {
			t.Fatalf("node %d: tracking filtered the depth otherwise than the graph", k)
		}
		snaps = append(snaps, ahead.snapshotPrepared(k, true, nil))
		// A copy into another frame's memory is the same copy.
		again := ahead.snapshotPrepared(k, true, snapshotCopy(snaps[0]))
		for l := range again.samples {
			if !slices.Equal(again.samples[l], snaps[k].samples[l]) || !slices.Equal(again.bands[l], snaps[k].bands[l]) {
				t.Fatalf("node %d, level %d: the copy into a spare frame differs", k, l)
			}
		}
	}
	topt := opt.Track
	topt.DepthFilter = 0
	reg, err := NewTracker(nil, intr, topt)
	if err != nil {
		t.Fatal(err)
	}
	viaHanded, err := NewTracker(nil, intr, topt)
	if err != nil {
		t.Fatal(err)
	}
	lo := opt.Loop
	lo.MinPairs = 500 // a quarter of the full-size images' 2000
	pairs := 0
	for j := 1; j < len(nodes); j++ {
		a, b := &nodes[j], &nodes[j-1]
		reg.useNode(a)
		viaHanded.useNode(a)
		fresh := &frameCache{size: 1}
		if !fresh.use(reg, j-1, b.tdepth, b.lum) {
			t.Fatal("the registration's frame has no colour term")
		}
		p := fresh.frames[0]
		for l := range p.samples {
			if !slices.Equal(p.samples[l], snaps[j-1].samples[l]) || !slices.Equal(p.bands[l], snaps[j-1].bands[l]) {
				t.Fatalf("node %d, level %d: the handed frame differs from the one prepared anew (%d and %d samples)",
					j-1, l, len(snaps[j-1].samples[l]), len(p.samples[l]))
			}
		}
		// The handed frame goes to the cache, which gives up the frame
		// it held (a copy of the one before).
		var spared []*preparedFrame
		handing := &frameCache{size: 1,
			handed: func(k int) *preparedFrame { return snaps[k] },
			spare:  func(p *preparedFrame) { spared = append(spared, p) }}
		if j > 1 {
			handing.frames = []*preparedFrame{snapshotCopy(snaps[j-2])}
		}
		got, gotOK, err := viaHanded.registerWith(ctx, a, b, j-1, handing, lo)
		if err != nil {
			t.Fatal(err)
		}
		if len(handing.frames) != 1 || handing.frames[0] != snaps[j-1] || (j > 1) != (len(spared) == 1) {
			t.Fatalf("pair %d–%d: the cache holds %d frames, %d spared", j-1, j, len(handing.frames), len(spared))
		}
		want, wantOK, err := reg.registerWith(ctx, a, b, j-1, &frameCache{size: 1}, lo)
		if err != nil {
			t.Fatal(err)
		}
		if gotOK != wantOK || got.z != want.z || got.info != want.info {
			t.Fatalf("pair %d–%d: edge %v (%v) through the handed frame, %v (%v) anew", j-1, j, got.z, gotOK, want.z, wantOK)
		}
		if gotOK {
			pairs++
		}
	}
	if pairs < 3 {
		t.Fatalf("%d pairs registered: the test needs more", pairs)
	}
}

// snapshotCopy copies a prepared frame.
func snapshotCopy(p *preparedFrame) *preparedFrame {
	q := &preparedFrame{node: p.node, colour: p.colour}
	for l := range p.samples {
		q.samples[l] = slices.Clone(p.samples[l])
		q.bands[l] = slices.Clone(p.bands[l])
	}
	return q
}

// TestFuseHandheldCancel checks that a handheld Fuse cancelled part way
// through tracking returns context.Canceled and leaves no goroutine
// behind (the prefetcher, the frames prepared ahead, the pose graph's
// background registrations).
func TestFuseHandheldCancel(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	dir := synthSweep(t, "valve", halfSizeHandheld(40))
	sw, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	before := runtime.NumGoroutine()
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	fo := DefaultFuseOptions()
	fo.Progress = func(stage string, done, total int) {
		if stage == "fuse" && done == 12 {
			cancel()
		}
	}
	if _, err := Fuse(ctx, sw, fo); !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
	// Goroutines that have returned may take a moment to be gone.
	for range 100 {
		if runtime.NumGoroutine() <= before {
			return
		}
		time.Sleep(10 * time.Millisecond)
	}
	t.Errorf("%d goroutines after the cancelled Fuse, %d before", runtime.NumGoroutine(), before)
}

// TestFuseHandheldStrictStops checks that a handheld Fuse that stops on
// a bad frame (Strict, a depth image whose pixel data is corrupt past a
// valid header) reports that frame and leaves no goroutine behind: the
// prefetcher's, the frames prepared ahead, the pose graph's.
func TestFuseHandheldStrictStops(t *testing.T) {
	if testing.Short() {
		t.Skip("renders a sweep")
	}
	dir := synthSweep(t, "valve", halfSizeHandheld(40))
	sw, err := LoadSweep(dir)
	if err != nil {
		t.Fatal(err)
	}
	name := filepath.Join(dir, sw.Manifest.Frames[15].Depth)
	data, err := os.ReadFile(name)
	if err != nil {
		t.Fatal(err)
	}
	for i := len(data) / 2; i < len(data)/2+64; i++ {
		data[i] ^= 0x5a
	}
	if err := os.WriteFile(name, data, 0o644); err != nil {
		t.Fatal(err)
	}
	before := runtime.NumGoroutine()
	fo := DefaultFuseOptions()
	fo.Strict = true
	_, err = Fuse(context.Background(), sw, fo)
	if err == nil || !strings.Contains(err.Error(), "frame 15") {
		t.Fatalf("err = %v, want one naming frame 15", err)
	}
	for range 100 {
		if runtime.NumGoroutine() <= before {
			return
		}
		time.Sleep(10 * time.Millisecond)
	}
	t.Errorf("%d goroutines after the stopped Fuse, %d before", runtime.NumGoroutine(), before)
}
