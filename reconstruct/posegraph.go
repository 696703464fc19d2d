package reconstruct

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// LoopOptions tunes the pose graph that corrects a handheld sweep's
// tracked poses once every frame is placed. Frame-to-model tracking
// drifts: each frame is placed against a model built from the frames
// before it, so a small error early is carried on, and the camera
// comes back to its first views a few millimetres off. The graph's
// nodes are placed frames spread around the sweep (a new one each
// NodeTurn of turn or NodeShift of travel); its edges are direct
// registrations of node pairs that see the same surface (the earlier
// node's frame, depth and colour, aligned as tracking aligns a frame
// with the later node's model map, kept from when it was tracked, and
// its colour as the keyframe) and tracking's relative poses between
// consecutive nodes, each weighted by the information its pixel pairs
// carry; the first node stays put and the
// others move to agree with all their edges at once (Gauss–Newton on
// the poses; pose-graph optimisation as in Lu & Milios 1997,
// "Globally consistent range scan alignment for environment mapping",
// Autonomous Robots, DOI 10.1023/A:1008854305733, with dense RGB-D
// registrations for edges as in Choi, Zhou & Koltun 2015, "Robust
// reconstruction of indoor scenes", CVPR, DOI
// 10.1109/CVPR.2015.7299195). Frames between nodes take their nodes'
// corrections, interpolated.
type LoopOptions struct {
	// NodeTurn and NodeShift: the first placed frame is a node, and
	// each placed frame whose camera has turned NodeTurn (radians) or
	// travelled NodeShift (metres) from the last node's, so each node
	// registers with about four neighbours on either side (MaxPairTurn);
	// a turn around a part gives about 23 nodes whatever its frames. Zero
	// NodeTurn turns the pose graph off.
	// DEFAULT: 15° (0.2618 rad), 0.15 m
	NodeTurn, NodeShift float64
	// MaxPairTurn: node pairs whose cameras' orientations differ by less
	// than this are registered with each other (radians). On the five
	// 120-frame handheld demo sweeps (model map at 320×240), nodes every
	// 15° and pairs within 36° left the worst camera error at 1.08–1.54
	// mm; pairs within 30°
	// (fewer, as nodes fall 15–18° apart) 1.14–2.32 mm; nodes every 12°
	// and pairs within 30°, 1.11–2.12 mm. On 14 sweeps (the five parts at
	// seed 11, seeds 1–3; FuseOptions.TrackBehind 1.5), the worst camera
	// error averaged 2.12 mm and reached 3.21 mm with pairs within 36°,
	// 2.00 / 2.97 within 50°, 1.96 / 2.87 within 60°, 1.88 / 2.66 within
	// 75°, and 25° with nodes every 10° did worse (3.83 mm). With the
	// band of 1 and DriftSpan 5: 1.79 / 2.57 within 45°, 1.71 / 2.38
	// within 60°, 1.64 / 2.48 within 75° (13 of 14 sweeps within 2 mm,
	// against 12 at 60° and 10 at 45°), 1.58 / 2.38 within 90° (13).
	// Each 15° more adds about a third more registrations: the 120-frame
	// bench sweep's graph took 1.43–1.60 s within 60° and 2.10–2.14 s
	// within 75° (BenchmarkPoseGraph, 2-core AMD EPYC), 1.77–1.83 s
	// within 75° after later speed changes that left the poses as they
	// were.
	// DEFAULT: 75° (1.309)
	MaxPairTurn float64
	// MaxShift and MaxTurn: a registration that moves a node farther
	// than this from where tracking put it relative to the other is
	// refused (metres, radians): a wrong registration, not drift.
	// DEFAULT: 0.015 m, 2° (0.0349 rad)
	MaxShift, MaxTurn float64
	// MinPairs: a registration with fewer pixel pairs at full
	// resolution is refused (too little shared surface).
	// DEFAULT: 2000
	MinPairs int
	// OutlierShift and OutlierTurn: after optimisation, a registration
	// edge still farther than this from agreeing with the graph is
	// dropped and the graph solved again (one at a time, worst first).
	// Least squares lets a wrong edge bend the graph toward it, so its
	// residual is only part of its error (a quarter, for an edge across
	// a ring of 12 equal edges); on the five 120-frame handheld demo
	// sweeps the edges kept agreed within 1.35 mm / 0.23°.
	// DEFAULT: 0.002 m, 0.5° (0.00873 rad)
	OutlierShift, OutlierTurn float64
	// Iterations bounds the Gauss–Newton iterations of each solve.
	// DEFAULT: 10
	Iterations int
	// DriftSpan: a node's correction is tracking's drift, shared by the
	// frames around it, plus the node frame's own tracking error, which
	// they do not share (tracking alone, consecutive frames' errors
	// differ by up to 2.46 mm in frames 43–63 of the seed-1 handheld
	// path, where the table holds the camera little, and by up to 1.80
	// mm on seed 11). So a node's own frame takes its own correction, and
	// the frames between nodes take their nodes' corrections averaged
	// over DriftSpan nodes on either side, weighted DriftSpan+1−|d| at d
	// nodes away, then interpolated. 0 (or less) interpolates the nodes'
	// own corrections. On 14 handheld sweeps (the five parts at seed 11,
	// seeds 1–3), the worst camera error averaged 1.64 mm, reached 2.48
	// mm and stayed within 2 mm on 13 sweeps with a span of 5 and pairs
	// within 75°, against 1.74 / 2.78 / 10 with a span of 0. With pairs
	// within 60°: span 5, 1.71 / 2.38 / 12; span 0, 1.87 / 3.14 / 10; a
	// flat average over 2 nodes either side, 1.73 / 2.48 / 11, and the
	// same moving the node frames too, 1.92 / 3.45 / 10. These figures
	// predate the tracker's unbiased coarse levels (downDepth); with
	// them, span 5 and pairs within 75° give 1.62 / 2.57 / 12, and the
	// average per-frame error fell from 0.55 to 0.49 mm; with
	// TrackOptions.DepthFilter too, 1.38 / 1.77 / 14 and 0.42 mm.
	// DEFAULT: 5
	DriftSpan int
}

// DefaultLoopOptions returns the documented defaults.
func DefaultLoopOptions() LoopOptions {
	return LoopOptions{
		NodeTurn:     15 * math.Pi / 180,
		NodeShift:    0.15,
		MaxPairTurn:  75 * math.Pi / 180,
		MaxShift:     0.015,
		MaxTurn:      2 * math.Pi / 180,
		MinPairs:     2000,
		OutlierShift: 0.002,
		OutlierTurn:  0.5 * math.Pi / 180,
		Iterations:   10,
		DriftSpan:    5,
	}
}

// graphNode is a placed frame kept for the pose graph.
type graphNode struct {
	placed     int // its index among the placed frames
	pose       mesh.Pose
	depth, lum []float32
	// tdepth is the depth registrations align: depth smoothed by
	// TrackOptions.DepthFilter, or nil until build fills it in
	tdepth []float32
	// model is the tracker's model map right after the node's frame was
	// fused (raycast from pose)
	model *nodeModel
	// prep is the node's frame as tracking prepared it (samples and
	// bands of tdepth and lum), or nil; graphBuilder.add takes it
	prep *preparedFrame
}

// isNode reports whether a frame placed at pose is far enough from the
// last node (or there is none) to be a node.
func (lo LoopOptions) isNode(nodes []graphNode, pose mesh.Pose) bool {
	if len(nodes) == 0 {
		return true
	}
	last := nodes[len(nodes)-1].pose
	return mesh.RotationAngle(last, pose) >= lo.NodeTurn || r3.Norm(r3.Sub(last.T, pose.T)) >= lo.NodeShift
}

// nodeModel keeps a model map compactly (16 bytes a pixel instead of
// 48): each pixel's depth (z in the raycast's camera; the point lies on
// the pixel's ray) and its normal in that camera, in float32 (steps of
// 0.03 µm at half a metre); expand rebuilds the map for a camera pose.
type nodeModel struct {
	intr mesh.Intrinsics
	z    []float32
	n    [][3]float32
}

// compactModel keeps m, raycast from camToWorld.
func compactModel(m *ModelMap, camToWorld mesh.Pose) *nodeModel {
	c := &nodeModel{intr: m.Intr, z: make([]float32, len(m.Points)), n: make([][3]float32, len(m.Points))}
	worldToCam := camToWorld.Inv()
	for i, nv := range m.Normals {
		if nv == (r3.Vec{}) {
			continue
		}
		c.z[i] = float32(worldToCam.Apply(m.Points[i]).Z)
		nc := worldToCam.Rotate(nv)
		c.n[i] = [3]float32{float32(nc.X), float32(nc.Y), float32(nc.Z)}
	}
	return c
}

// expand writes the model map, seen from camToWorld, into dst (reused
// when its size fits) and returns it.
func (c *nodeModel) expand(camToWorld mesh.Pose, dst *ModelMap) *ModelMap {
	if dst == nil || len(dst.Points) != len(c.z) {
		dst = &ModelMap{Points: make([]r3.Vec, len(c.z)), Normals: make([]r3.Vec, len(c.z))}
	}
	dst.Intr = c.intr
	w := c.intr.Width
	for i, z := range c.z {
		if z == 0 {
			dst.Points[i], dst.Normals[i] = r3.Vec{}, r3.Vec{}
			continue
		}
		dst.Points[i] = camToWorld.Apply(c.intr.BackProject(float64(i%w), float64(i/w), float64(z)))
		dst.Normals[i] = camToWorld.Rotate(r3.Vec{X: float64(c.n[i][0]), Y: float64(c.n[i][1]), Z: float64(c.n[i][2])})
	}
	return dst
}

// graphEdge is a measured relative pose z = P_i⁻¹·P_j between nodes i
// and j with its information (the normal matrix of the registration
// that measured it, in world-frame small motions of node j).
type graphEdge struct {
	i, j int
	z    mesh.Pose
	info [6][6]float64
	// odometry edges hold tracking's relative pose between consecutive
	// nodes; never dropped
	odometry bool
}

// twist returns the small motion of pose p (≈ identity) as (ω, t):
// rotation vector, then translation, the order PlaneSystem uses.
func twist(p mesh.Pose) [6]float64 {
	axis, ang := p.AxisAngle()
	return [6]float64{axis.X * ang, axis.Y * ang, axis.Z * ang, p.T.X, p.T.Y, p.T.Z}
}

// expTwist is twist's inverse: rotation by ω about the origin, then
// translation by t.
func expTwist(x [6]float64) mesh.Pose {
	w := r3.Vec{X: x[0], Y: x[1], Z: x[2]}
	return mesh.PoseFromAxisAngle(w, r3.Norm(w), r3.Vec{X: x[3], Y: x[4], Z: x[5]})
}

// useNode makes node a's model map and colour the tracker's model and
// keyframe, for registerWith; poseGraph.build sets each later node up
// once for all the earlier nodes registered against it.
func (t *Tracker) useNode(a *graphNode) {
	t.model = a.model.expand(a.pose, t.model)
	t.modelPose = a.pose
	if t.opt.ColorSigma > 0 && a.lum != nil {
		t.SetKeyframe(a.lum, a.depth, a.pose)
	}
}

// registerWith aligns node b's frame with node a's model map (and its
// colour, as the keyframe), which useNode made the tracker's, starting
// from b's current pose, and returns the edge a→b, or false when the
// registration is refused (lost, too few pairs, or too far from the
// start). frames holds the frames the tracker prepared lately; bi is
// b's index among the nodes.
func (t *Tracker) registerWith(ctx context.Context, a, b *graphNode, bi int, frames *frameCache, lo LoopOptions) (graphEdge, bool, error) {
	colour := t.opt.ColorSigma > 0 && a.lum != nil && b.lum != nil
	lum := b.lum
	if !colour {
		lum = nil
	}
	res, err := t.trackPrepared(ctx, frames.use(t, bi, b.tdepth, lum), b.pose)
	if err != nil || res.Lost || res.Pairs < lo.MinPairs {
		return graphEdge{}, false, err
	}
	moved := b.pose.Inv().Mul(res.CamToWorld)
	if r3.Norm(moved.T) > lo.MaxShift || mesh.RotationAngle(moved, mesh.Identity()) > lo.MaxTurn {
		return graphEdge{}, false, nil
	}
	// The information is the last full-resolution step's, taken one
	// step (of less than TrackOptions.StopShift/StopTurn, or the last
	// iteration's) before the result: two more passes to measure it at
	// the result cost a tenth of the graph's time and moved no node.
	return graphEdge{z: a.pose.Inv().Mul(res.CamToWorld), info: res.system.Normal()}, true, nil
}

// preparedFrame is one node's frame made ready for registration
// (Tracker.prepare): each pyramid level's samples and bands, all that
// alignment reads of the frame, and whether they carry luminance.
type preparedFrame struct {
	node    int
	colour  bool
	samples [pyramidLevels][]trackSample
	bands   [pyramidLevels][]int
}

// snapshotPrepared copies the frame t's last prepare made ready, as node
// k's, for the pose graph's registrations. Tracking prepares a node's
// frame as a registration would (Tracker.prepare: the same depth once
// filtered, the same luminance, no mask), and alignment only reads
// samples and bands, so the copy is what a registration would prepare,
// to the bit (TestHandedFrames), for a copy of 7–8 MB instead of a
// pyramid's build. The copy goes into into's memory when into is not
// nil (a frame a cache let go: graphBuilder.spareFrame).
func (t *Tracker) snapshotPrepared(k int, colour bool, into *preparedFrame) *preparedFrame {
	p := into
	if p == nil {
		p = &preparedFrame{}
	}
	p.node, p.colour = k, colour
	for l := range t.levels {
		p.samples[l] = append(p.samples[l][:0], t.levels[l].samples...)
		p.bands[l] = append(p.bands[l][:0], t.levels[l].bands...)
	}
	return p
}

// frameCache keeps the frames one tracker prepared for its last
// registrations, up to size of them (7–8 MB each at 640×480), so that a
// node registered against several later nodes has its pyramid built
// once: building it took about a third of the pose graph's time.
type frameCache struct {
	frames []*preparedFrame
	size   int
	// handed, when set, gives node k's frame as tracking prepared it,
	// or nil, and gives it up: the cache owns what it returns. spare,
	// when set, takes the frames the cache lets go of for their memory.
	handed func(k int) *preparedFrame
	spare  func(*preparedFrame)
}

// use makes node k's frame (its depth for tracking, and its luminance
// or nil) the frame t aligns next: from the cache, or else handed over,
// or else prepared anew, in place of the cached frame of the lowest
// node index (registrations come in rising node order); it reports
// whether the colour term applies, as Tracker.prepare does. The
// tracker's levels then share their samples with the cache: only use
// may prepare frames on t.
func (c *frameCache) use(t *Tracker, k int, depth, lum []float32) bool {
	colour := lum != nil && t.key != nil && t.opt.ColorSigma > 0
	var p *preparedFrame
	for _, q := range c.frames {
		if q.node == k && q.colour == colour {
			p = q
			break
		}
	}
	fresh := p == nil
	if fresh {
		slot := len(c.frames)
		if slot < c.size {
			c.frames = append(c.frames, nil)
		} else {
			slot = 0
			for i, q := range c.frames {
				if q.node < c.frames[slot].node {
					slot = i
				}
			}
		}
		if c.handed != nil {
			if h := c.handed(k); h != nil && h.colour == colour {
				p, fresh = h, false
			} else if h != nil && c.spare != nil {
				c.spare(h)
			}
		}
		switch {
		case p != nil:
			if victim := c.frames[slot]; victim != nil && c.spare != nil {
				c.spare(victim)
			}
		case c.frames[slot] != nil:
			p = c.frames[slot] // prepared anew in the victim's memory
		default:
			p = &preparedFrame{}
		}
		c.frames[slot] = p
		p.node, p.colour = k, colour
	}
	// The levels take the frame's buffers: to fill, when fresh (reusing
	// the memory of the frame it replaces), or as they are.
	for l := range t.levels {
		t.levels[l].samples, t.levels[l].bands = p.samples[l], p.bands[l]
	}
	if fresh {
		t.prepare(depth, lum, nil)
		for l := range t.levels {
			p.samples[l], p.bands[l] = t.levels[l].samples, t.levels[l].bands
		}
	}
	return colour
}

// poseGraph holds the nodes and edges of one optimisation.
type poseGraph struct {
	nodes []graphNode
	edges []graphEdge
}

// build registers every pair of nodes whose cameras turned less than
// MaxPairTurn apart, on workers goroutines (0: one per core; each with
// its own tracker), and ties consecutive nodes by tracking's relative
// pose. Edges come out in pair order, whatever the timing.
func (g *poseGraph) build(ctx context.Context, intr mesh.Intrinsics, topt TrackOptions, lo LoopOptions, workers int) error {
	b := newGraphBuilder(ctx, intr, topt, lo, workers, false)
	defer b.stop()
	for k := range g.nodes {
		g.nodes[k].tdepth = b.add(g.nodes[k])
	}
	return g.finish(b)
}

// graphBuilder registers the pose graph's node pairs as the nodes come
// in (add): each new node against the earlier ones within MaxPairTurn.
// In the background it does so on one goroutine while the caller goes
// on (a handheld sweep's tracking leaves a core idle a fifth of the
// time), and on all workers once finish waits for the rest.
type graphBuilder struct {
	ctx        context.Context
	intr       mesh.Intrinsics
	topt       TrackOptions // for the registrations: no depth filter, one worker
	filter     float64      // TrackOptions.DepthFilter, for nodes that come unfiltered
	lo         LoopOptions
	workers    int
	background bool
	filterTmp  []float32

	nodes []*graphNode
	jobs  []*graphJob // every node's, in node order
	// handed holds the frames tracking prepared, by node, for the last
	// keepHanded nodes until a worker's cache takes them (under mu);
	// spare holds frames caches let go of, for their memory
	handed []*preparedFrame
	spare  chan *preparedFrame

	mu      sync.Mutex
	cond    *sync.Cond
	pending []*graphJob // not yet taken by a worker
	closed  bool
	runLen  int // once closed, how many pairs a worker takes at a time
	started int
	wg      sync.WaitGroup
}

// graphJob is one node's registrations: against each earlier node
// within MaxPairTurn (rising index), with their results.
type graphJob struct {
	j       int
	node    *graphNode
	earlier []int
	others  []*graphNode
	edges   []graphEdge
	ok      []bool
	errs    []error
}

// newGraphBuilder returns a builder; with background set (and more than
// one worker) one goroutine starts registering at once.
func newGraphBuilder(ctx context.Context, intr mesh.Intrinsics, topt TrackOptions, lo LoopOptions, workers int, background bool) *graphBuilder {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	b := &graphBuilder{ctx: ctx, intr: intr, topt: topt, filter: topt.DepthFilter, lo: lo, workers: workers,
		background: background && workers > 1}
	b.topt.DepthFilter, b.topt.Workers = 0, 1
	b.cond = sync.NewCond(&b.mu)
	b.spare = make(chan *preparedFrame, 1)
	if b.background {
		b.start(1)
	}
	return b
}

// add takes the next node, complete (its model map set), and returns
// the depth its registrations align: the node's tdepth, or its depth
// filtered here by TrackOptions.DepthFilter when tdepth is nil. The
// builder keeps its own copy of the node; the slices it holds must not
// change from here on.
func (b *graphBuilder) add(n graphNode) []float32 {
	if n.tdepth == nil {
		n.tdepth = n.depth
		if b.filter > 0 {
			if len(b.filterTmp) != len(n.depth) {
				b.filterTmp = make([]float32, len(n.depth))
			}
			n.tdepth = make([]float32, len(n.depth))
			bilateralDepth(n.depth, n.tdepth, b.filterTmp, b.intr.Width, b.intr.Height, b.filter, b.workers)
		}
	}
	node := &n
	job := &graphJob{j: len(b.nodes), node: node}
	b.mu.Lock()
	b.handed = append(b.handed, n.prep)
	if old := len(b.handed) - 1 - keepHanded; old >= 0 && b.handed[old] != nil {
		b.recycle(b.handed[old])
		b.handed[old] = nil
	}
	b.mu.Unlock()
	node.prep = nil
	for i, m := range b.nodes {
		if mesh.RotationAngle(m.pose, node.pose) < b.lo.MaxPairTurn {
			job.earlier = append(job.earlier, i)
			job.others = append(job.others, m)
		}
	}
	job.edges = make([]graphEdge, len(job.earlier))
	job.ok = make([]bool, len(job.earlier))
	job.errs = make([]error, len(job.earlier))
	b.nodes = append(b.nodes, node)
	b.jobs = append(b.jobs, job)
	if len(job.earlier) > 0 {
		b.mu.Lock()
		b.pending = append(b.pending, job)
		b.mu.Unlock()
		b.cond.Signal()
	}
	return n.tdepth
}

// keepHanded is how many of the latest nodes' handed frames a builder
// keeps: a node's registrations are mostly against the few nodes before
// it (MaxPairTurn 75° holds five nodes 15° apart). Older frames are
// prepared anew if a registration needs them, a loop's closure say.
const keepHanded = 6

// takeHanded returns node i's frame as tracking prepared it, or nil,
// and gives it up to the caller.
func (b *graphBuilder) takeHanded(i int) *preparedFrame {
	b.mu.Lock()
	defer b.mu.Unlock()
	if i < len(b.handed) {
		p := b.handed[i]
		b.handed[i] = nil
		return p
	}
	return nil
}

// recycle keeps a frame no one holds any longer for spareFrame, if
// there is room.
func (b *graphBuilder) recycle(p *preparedFrame) {
	select {
	case b.spare <- p:
	default:
	}
}

// spareFrame returns a frame recycled, for its memory, or nil.
func (b *graphBuilder) spareFrame() *preparedFrame {
	select {
	case p := <-b.spare:
		return p
	default:
		return nil
	}
}

// start starts n more workers, each with its own tracker and cache of
// prepared frames.
func (b *graphBuilder) start(n int) {
	for range n {
		b.started++
		b.wg.Add(1)
		go func() {
			defer b.wg.Done()
			tr, err := NewTracker(nil, b.intr, b.topt)
			frames := &frameCache{size: 1, handed: b.takeHanded, spare: b.recycle}
			for {
				run := b.take()
				if run == nil {
					return
				}
				for _, job := range run {
					if err != nil {
						job.errs[0] = err
						continue
					}
					// the later node's model (more of the scene fused), the
					// earlier nodes' frames
					tr.useNode(job.node)
					frames.size = max(frames.size, len(job.earlier))
					for k, i := range job.earlier {
						job.edges[k], job.ok[k], job.errs[k] = tr.registerWith(b.ctx, job.node, job.others[k], i, frames, b.lo)
						job.edges[k].i, job.edges[k].j = job.j, i
					}
				}
			}
		}()
	}
}

// take waits for pending jobs and returns the next run of them: one job
// while nodes may still come in, about runLen pairs of consecutive
// nodes once they are all in (their earlier nodes' frames repeat from
// one job to the next, for the worker's cache); nil when none is left.
func (b *graphBuilder) take() []*graphJob {
	b.mu.Lock()
	defer b.mu.Unlock()
	for len(b.pending) == 0 && !b.closed {
		b.cond.Wait()
	}
	if len(b.pending) == 0 {
		return nil
	}
	n, pairs := 1, len(b.pending[0].earlier)
	if b.closed {
		for n < len(b.pending) && pairs < b.runLen {
			pairs += len(b.pending[n].earlier)
			n++
		}
	}
	run := slices.Clone(b.pending[:n])
	b.pending = b.pending[n:]
	return run
}

// close takes no more nodes, lets all the workers finish the pending
// registrations and waits for them.
func (b *graphBuilder) close() {
	b.mu.Lock()
	if !b.closed {
		b.closed = true
		pairs := 0
		for _, job := range b.pending {
			pairs += len(job.earlier)
		}
		b.runLen = max(1, pairs/(3*b.workers))
	}
	b.mu.Unlock()
	b.cond.Broadcast()
	if b.started < b.workers {
		b.start(b.workers - b.started)
	}
	b.wg.Wait()
}

// stop drops the registrations no worker has taken and waits for the
// ones under way: for a caller that gives up before finish.
func (b *graphBuilder) stop() {
	b.mu.Lock()
	b.closed = true
	b.pending = nil
	b.mu.Unlock()
	b.cond.Broadcast()
	b.wg.Wait()
}

// finish waits for the builder's registrations and makes g's edges from
// them, in pair order (earlier node first).
func (g *poseGraph) finish(b *graphBuilder) error {
	b.close()
	type pair struct{ i, k int }
	var order []pair // job index of the later node, place in its job
	var errs []error
	for _, job := range b.jobs {
		errs = append(errs, job.errs...)
		for k := range job.earlier {
			order = append(order, pair{job.j, k})
		}
	}
	if err := errors.Join(errs...); err != nil {
		return err
	}
	slices.SortFunc(order, func(x, y pair) int {
		if c := cmp.Compare(b.jobs[x.i].earlier[x.k], b.jobs[y.i].earlier[y.k]); c != 0 {
			return c
		}
		return cmp.Compare(x.i, y.i)
	})
	got := make([]graphEdge, len(order))
	ok := make([]bool, len(order))
	for n, p := range order {
		got[n], ok[n] = b.jobs[p.i].edges[p.k], b.jobs[p.i].ok[p.k]
	}
	// Tracking's relative pose between consecutive nodes is an edge too
	// (the tracker placed the frames between them against a model that
	// held both), weighted like the registration of the same pair, or
	// like an average registration where that failed; so a registration
	// a millimetre off does not carry its nodes alone, and the graph
	// stays connected.
	pairInfo := make([]*[6][6]float64, len(g.nodes))
	var sum [6][6]float64
	for k, e := range got {
		if !ok[k] {
			continue
		}
		g.edges = append(g.edges, e)
		if e.i == e.j+1 {
			pairInfo[e.j] = &got[k].info
		}
		for u := range sum {
			for v := range sum[u] {
				sum[u][v] += e.info[u][v]
			}
		}
	}
	registered := len(g.edges)
	for i := 0; i+1 < len(g.nodes); i++ {
		e := graphEdge{i: i, j: i + 1, z: g.nodes[i].pose.Inv().Mul(g.nodes[i+1].pose), odometry: true}
		switch {
		case pairInfo[i] != nil:
			e.info = *pairInfo[i]
		case registered > 0:
			for u := range sum {
				for v := range sum[u] {
					e.info[u][v] = sum[u][v] / float64(registered)
				}
			}
		default:
			for u := range e.info {
				e.info[u][u] = 1
			}
		}
		g.edges = append(g.edges, e)
	}
	return nil
}

// solve moves every node but the first to minimise
// Σ ½·rᵀ·Λ·r over the edges, r the small motion P_i·z·P_j⁻¹ that would
// carry node j to where edge (i, j) puts it and Λ the edge's
// information. Perturbing P_i ← exp(δ_i)·P_i (world-frame small motions)
// changes r by δ_i − δ_j to first order, so each Gauss–Newton step
// solves a block-Laplacian system (Cholesky, gonum). It returns the
// nodes' new poses.
func (g *poseGraph) solve(iterations int) ([]mesh.Pose, error) {
	n := len(g.nodes)
	poses := make([]mesh.Pose, n)
	for k := range g.nodes {
		poses[k] = g.nodes[k].pose
	}
	if n < 2 {
		return poses, nil
	}
	dim := 6 * (n - 1)
	h := mat.NewSymDense(dim, nil)
	grad := mat.NewVecDense(dim, nil)
	var chol mat.Cholesky
	var x mat.VecDense
	for it := 0; it < iterations; it++ {
		h.Zero()
		grad.Zero()
		for _, e := range g.edges {
			r := twist(poses[e.i].Mul(e.z).Mul(poses[e.j].Inv()))
			var lr [6]float64
			for u := 0; u < 6; u++ {
				for v := 0; v < 6; v++ {
					lr[u] += e.info[u][v] * r[v]
				}
			}
			// unknown block of node k is 6(k−1); node 0 is fixed
			bi, bj := 6*(e.i-1), 6*(e.j-1)
			for u := 0; u < 6; u++ {
				if e.i > 0 {
					grad.SetVec(bi+u, grad.AtVec(bi+u)+lr[u])
				}
				if e.j > 0 {
					grad.SetVec(bj+u, grad.AtVec(bj+u)-lr[u])
				}
				for v := u; v < 6; v++ {
					l := e.info[u][v]
					if e.i > 0 {
						h.SetSym(bi+u, bi+v, h.At(bi+u, bi+v)+l)
					}
					if e.j > 0 {
						h.SetSym(bj+u, bj+v, h.At(bj+u, bj+v)+l)
					}
				}
				if e.i > 0 && e.j > 0 {
					for v := 0; v < 6; v++ {
						// off-diagonal blocks: −Λ at (i, j) (and its
						// transpose at (j, i), which SetSym writes too)
						ii, jj := bi+u, bj+v
						h.SetSym(ii, jj, h.At(ii, jj)-e.info[u][v])
					}
				}
			}
		}
		if !chol.Factorize(h) {
			return nil, fmt.Errorf("reconstruct: pose graph: the nodes are not all linked to the first (singular system)")
		}
		grad.ScaleVec(-1, grad)
		if err := chol.SolveVecTo(&x, grad); err != nil {
			return nil, fmt.Errorf("reconstruct: pose graph: %w", err)
		}
		var biggest float64
		for k := 1; k < n; k++ {
			var d [6]float64
			for u := range d {
				d[u] = x.AtVec(6*(k-1) + u)
			}
			poses[k] = expTwist(d).Mul(poses[k]).Orthonormalize()
			biggest = math.Max(biggest, math.Hypot(math.Hypot(d[0], d[1]), d[2])*0.5+math.Hypot(math.Hypot(d[3], d[4]), d[5]))
		}
		if biggest < 1e-7 {
			break
		}
	}
	return poses, nil
}

// optimise solves the graph, then drops the registration edge that
// agrees worst with the solution while one is beyond the outlier
// limits, and solves again. It returns the nodes' poses and the number
// of edges dropped.
func (g *poseGraph) optimise(lo LoopOptions) ([]mesh.Pose, int, error) {
	dropped := 0
	for {
		poses, err := g.solve(lo.Iterations)
		if err != nil {
			return nil, dropped, err
		}
		worst, worstK := 1.0, -1
		for k, e := range g.edges {
			if e.odometry {
				continue
			}
			r := poses[e.i].Mul(e.z).Mul(poses[e.j].Inv())
			// r moves node j; measure its shift at node j's camera
			shift := r3.Norm(r3.Sub(r.Apply(poses[e.j].T), poses[e.j].T))
			s := math.Max(shift/lo.OutlierShift, mesh.RotationAngle(r, mesh.Identity())/lo.OutlierTurn)
			if s > worst {
				worst, worstK = s, k
			}
		}
		if worstK < 0 {
			return poses, dropped, nil
		}
		g.edges = append(g.edges[:worstK], g.edges[worstK+1:]...)
		dropped++
	}
}

// correctPoses spreads the nodes' corrections (new·old⁻¹, world-frame
// small motions) over the placed frames: a node's frame takes its own
// correction; a frame between two nodes takes their corrections averaged
// over span nodes on either side (LoopOptions.DriftSpan) and
// interpolated by its place between them; a frame after the last node
// takes the last node's averaged correction.
func correctPoses(poses []mesh.Pose, nodes []graphNode, newNode []mesh.Pose, span int) []mesh.Pose {
	out := make([]mesh.Pose, len(poses))
	own := make([][6]float64, len(nodes))
	for k := range nodes {
		own[k] = twist(newNode[k].Mul(nodes[k].pose.Inv()))
	}
	span = max(span, 0)
	drift := make([][6]float64, len(nodes))
	for k := range nodes {
		var wsum float64
		for q := max(0, k-span); q <= min(len(nodes)-1, k+span); q++ {
			w := float64(span + 1 - max(q-k, k-q))
			for u := range drift[k] {
				drift[k][u] += w * own[q][u]
			}
			wsum += w
		}
		for u := range drift[k] {
			drift[k][u] /= wsum
		}
	}
	k := 0
	for f := range poses {
		for k+1 < len(nodes) && nodes[k+1].placed <= f {
			k++
		}
		var c [6]float64
		switch {
		case f == nodes[k].placed:
			c = own[k]
		case k+1 < len(nodes):
			s := float64(f-nodes[k].placed) / float64(nodes[k+1].placed-nodes[k].placed)
			for u := range c {
				c[u] = (1-s)*drift[k][u] + s*drift[k+1][u]
			}
		default:
			c = drift[k]
		}
		out[f] = expTwist(c).Mul(poses[f]).Orthonormalize()
	}
	return out
}
