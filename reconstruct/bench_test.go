package reconstruct

import (
	"context"
	"fmt"
	"hash/fnv"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"runtime/metrics"
	"sync"
	"syscall"
	"testing"
	"time"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// The fusion benchmarks run on synthetic sweeps of the demo bracket at
// 640×480 (Synth's defaults: 0.55 m, 30° elevation, the sensor noise of
// Nguyen et al. 2012), fused at 2 mm voxels (DefaultFuseOptions).
// Rendering a 72-frame sweep takes about 25 s on two cores, so the
// sweeps are kept between runs in $SCANFOLD_BENCH_SWEEPS, or
// scanfold-bench-sweeps in the system's temporary folder, under a name
// that hashes the part mesh and the synthesis options; delete the folder
// after changing the renderer itself.
//
//	go test ./reconstruct/ -run '^$' -bench . -count 3
//
// Each benchmark reports, beside the wall time, the process's CPU time
// per unit of work (cpu-ms/...): on a shared machine the wall time grows
// with the load, the CPU time much less.
//
// The sweeps have the frame counts the targets are set on: 72
// frames for the turntable, 120 for the handheld rig (3° of camera turn
// a frame). The handheld benchmarks ran on 60 frames before 2026-12-02;
// BENCHMARKS.md keeps both.
const (
	benchTurntableFrames = 72
	benchHandheldFrames  = 120
)

// benchSweep returns the folder of a synthetic sweep of the bracket,
// rendering it unless the cache holds it.
func benchSweep(b *testing.B, rig Rig, frames int) string {
	b.Helper()
	opt := DefaultSynthOptions()
	opt.Rig = rig
	opt.Frames = frames
	m, err := SynthPartMesh("bracket", DefaultPartSpacing)
	if err != nil {
		b.Fatal(err)
	}
	h := fnv.New64a()
	fmt.Fprintf(h, "%+v %v %v", opt, m.Vertices, m.Faces)
	root := os.Getenv("SCANFOLD_BENCH_SWEEPS")
	if root == "" {
		root = filepath.Join(os.TempDir(), "scanfold-bench-sweeps")
	}
	dir := filepath.Join(root, fmt.Sprintf("bracket-%s-%d-%016x", rig, frames, h.Sum64()))
	if _, err := os.Stat(filepath.Join(dir, ManifestName)); err == nil {
		return dir
	}
	if err := os.MkdirAll(root, 0o755); err != nil {
		b.Fatal(err)
	}
	if _, err := Synth(context.Background(), dir, m, opt); err != nil {
		if _, statErr := os.Stat(filepath.Join(dir, ManifestName)); statErr == nil {
			return dir // another run rendered it meanwhile
		}
		b.Fatal(err)
	}
	return dir
}

// benchFrames is a decoded sweep held in memory with what the pipeline
// computes per frame before integration (poses from a Fuse run, the
// region-of-interest mask, weights and behind-bands), so that
// Integrate can be timed alone.
type benchFrames struct {
	intr   mesh.Intrinsics
	images []*DepthImage
	poses  []mesh.Pose
	roi    ROI
	// final is the part volume after fusing every frame.
	final *Volume
}

var benchCache struct {
	sync.Mutex
	tt *benchFrames
}

// turntableFrames decodes the 72-frame turntable sweep, fuses it once
// through Fuse for its poses and region of interest, and prepares every
// frame's integration input as Fuse does.
func turntableFrames(b *testing.B) *benchFrames {
	b.Helper()
	benchCache.Lock()
	defer benchCache.Unlock()
	if benchCache.tt != nil {
		return benchCache.tt
	}
	dir := benchSweep(b, RigTurntable, benchTurntableFrames)
	sw, err := LoadSweep(dir)
	if err != nil {
		b.Fatal(err)
	}
	opt := DefaultFuseOptions()
	res, err := Fuse(context.Background(), sw, opt)
	if err != nil {
		b.Fatal(err)
	}
	rep := res.Report
	bf := &benchFrames{intr: sw.Manifest.Intrinsics, roi: rep.ROI}
	f := &fuser{opt: opt, roi: rep.ROI}
	wo := opt.Weights
	wo.BehindMin = 1.75 * opt.TSDF.VoxelSize
	reach := 4*opt.TSDF.VoxelSize + math.Sqrt(3)*opt.TSDF.VoxelSize*BlockSide // Volume.AllocReach
	for _, idx := range sw.Usable() {
		fr, err := sw.Frame(idx)
		if err != nil {
			b.Fatal(err)
		}
		pose := rep.CamToWorld[idx]
		im := fr.DepthImage()
		wo.Region = rep.ROI.ImageRect(fr.Intr, pose, reach, opt.TSDF.MinDepth)
		im.Weight, im.Behind = MeasurementBands(fr.Depth, fr.Intr, wo, nil, nil, true)
		im.Alloc = f.mask(fr, pose, nil)
		bf.images = append(bf.images, im)
		bf.poses = append(bf.poses, pose)
	}
	bf.final, err = NewVolume(opt.TSDF)
	if err != nil {
		b.Fatal(err)
	}
	for i, im := range bf.images {
		if _, err := bf.final.Integrate(context.Background(), im, bf.poses[i]); err != nil {
			b.Fatal(err)
		}
	}
	benchCache.tt = bf
	return bf
}

// volumeMB is the memory held by a volume's voxels.
func volumeMB(v *Volume) float64 {
	return float64(v.NumBlocks()) * float64(blockBytes) / (1 << 20)
}

// blockBytes is one block's voxels (distance, weight, colour) and its
// observed-voxel mask.
const blockBytes = blockVoxels*(4+4+12) + blockVoxels/8

// BenchmarkIntegrate times Volume.Integrate alone, with the masks,
// weights and bands Fuse computes, over the 72 frames of the turntable
// sweep into a fresh volume per op (so block allocation is included),
// on one core and on all cores; ms/frame is the figure against the
// target of 2.5 ms a frame on one core. "dense" is the textbook
// integrator over a fixed 30 cm cube of the same 2 mm voxels (every
// voxel projected every frame) on one core, on every fourth frame.
func BenchmarkIntegrate(b *testing.B) {
	bf := turntableFrames(b)
	ctx := context.Background()
	for _, workers := range []int{1, 0} {
		name := "sparse/workers=1"
		if workers == 0 {
			name = fmt.Sprintf("sparse/workers=%d", runtime.GOMAXPROCS(0))
		}
		b.Run(name, func(b *testing.B) {
			opt := DefaultTSDFOptions()
			opt.Workers = workers
			var vol *Volume
			var visits, updates int
			b.ReportAllocs()
			b.ResetTimer()
			cpu := startCPU()
			for i := 0; i < b.N; i++ {
				var err error
				if vol, err = NewVolume(opt); err != nil {
					b.Fatal(err)
				}
				visits, updates = 0, 0
				for k, im := range bf.images {
					st, err := vol.Integrate(ctx, im, bf.poses[k])
					if err != nil {
						b.Fatal(err)
					}
					visits += st.UpdatedBlocks * blockVoxels
					updates += st.Updates
				}
			}
			b.StopTimer()
			b.ReportMetric(float64(visits)/float64(len(bf.images)), "voxels/frame")
			b.ReportMetric(float64(updates)/float64(len(bf.images)), "updates/frame")
			cpu.report(b, b.N*len(bf.images), "frame")
			b.ReportMetric(float64(b.Elapsed().Microseconds())/1000/float64(b.N*len(bf.images)), "ms/frame")
			b.ReportMetric(float64(vol.NumBlocks()), "blocks")
			b.ReportMetric(volumeMB(vol), "MB-voxels")
		})
	}
	b.Run("dense/workers=1", func(b *testing.B) {
		const side = 0.30
		// The cube is centred on the region of interest's axis, half
		// its height above the support.
		r := bf.roi
		centre := r3.Add(r.Centre, r3.Scale((r.Bottom+r.Top)/2, r.Plane.Normal))
		origin := r3.Sub(centre, r3.Vec{X: side / 2, Y: side / 2, Z: side / 2})
		frames := 0
		b.ResetTimer()
		cpu := startCPU()
		for i := 0; i < b.N; i++ {
			g := newDenseTSDF(origin, side, DefaultTSDFOptions().VoxelSize)
			for k := 0; k < len(bf.images); k += 4 {
				g.integrate(bf.images[k], bf.poses[k])
				frames++
			}
		}
		b.StopTimer()
		cpu.report(b, frames, "frame")
		b.ReportMetric(float64(b.Elapsed().Microseconds())/1000/float64(frames), "ms/frame")
		n := int(math.Ceil(side / DefaultTSDFOptions().VoxelSize))
		b.ReportMetric(float64(n*n*n)*20/(1<<20), "MB-voxels")
	})
}

// BenchmarkExtract extracts the mesh of the volume fused from the 72
// turntable frames (target ≤ 100 ms).
func BenchmarkExtract(b *testing.B) {
	bf := turntableFrames(b)
	var m *mesh.Mesh
	b.ReportAllocs()
	b.ResetTimer()
	cpu := startCPU()
	for i := 0; i < b.N; i++ {
		var err error
		if m, err = bf.final.Extract(DefaultFuseOptions().MinWeight); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	cpu.report(b, b.N, "op")
	b.ReportMetric(float64(len(m.Faces)), "triangles")
	b.ReportMetric(float64(bf.final.NumBlocks()), "blocks")
}

// BenchmarkFrameStages times the per-frame stages of a turntable Fuse
// one by one on the sweep's frames: PNG decode (depth and colour),
// colour repacking, weights and bands (over the whole image, and over
// the part's rectangle as Fuse computes them for a turntable), the
// region-of-interest mask.
func BenchmarkFrameStages(b *testing.B) {
	bf := turntableFrames(b)
	dir := benchSweep(b, RigTurntable, benchTurntableFrames)
	sw, err := LoadSweep(dir)
	if err != nil {
		b.Fatal(err)
	}
	opt := DefaultFuseOptions()
	wo := opt.Weights
	wo.BehindMin = 1.75 * opt.TSDF.VoxelSize
	n := len(bf.images)
	stage := func(name string, f func(i int)) {
		b.Run(name, func(b *testing.B) {
			f(0) // first call allocates the scratch
			b.ReportAllocs()
			b.ResetTimer()
			cpu := startCPU()
			for i := 0; i < b.N; i++ {
				f(i)
			}
			b.StopTimer()
			cpu.report(b, b.N, "op")
		})
	}
	stage("decode", func(i int) {
		if _, err := sw.Frame(sw.Usable()[i%n]); err != nil {
			b.Fatal(err)
		}
	})
	fr, err := sw.Frame(sw.Usable()[n/3])
	if err != nil {
		b.Fatal(err)
	}
	stage("depthimage", func(int) { fr.DepthImage() })
	for _, workers := range []int{1, 0} {
		var wt, bh []float32
		o := wo
		o.Workers = workers
		stage(fmt.Sprintf("weights/workers=%d", max(workers, runtime.GOMAXPROCS(0)*(1-workers))), func(int) {
			wt, bh = MeasurementBands(fr.Depth, fr.Intr, o, wt, bh, true)
		})
	}
	{
		var wt, bh []float32
		o := wo
		o.Region = bf.roi.ImageRect(fr.Intr, bf.poses[n/3], bf.final.AllocReach(), opt.TSDF.MinDepth)
		stage("weights/region", func(int) {
			wt, bh = MeasurementBands(fr.Depth, fr.Intr, o, wt, bh, true)
		})
	}
	var m []bool
	stage("mask", func(int) { m = bf.roi.Mask(fr.Depth, fr.Intr, bf.poses[n/3], m) })
}

// peakHeap samples the Go heap while it runs f and returns the largest
// figure seen (bytes in live and not yet swept objects).
func peakHeap(f func()) uint64 {
	s := []metrics.Sample{{Name: "/memory/classes/heap/objects:bytes"}}
	var peak uint64
	read := func() {
		metrics.Read(s)
		if v := s[0].Value.Uint64(); v > peak {
			peak = v
		}
	}
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		t := time.NewTicker(5 * time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-done:
				return
			case <-t.C:
				read()
			}
		}
	}()
	f()
	close(done)
	wg.Wait()
	read()
	return peak
}

// cpuTime returns the CPU time the process has used (user + system).
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// cpuMeter reports, next to the wall time, the CPU time the process
// spent per unit of work: on a shared, loaded machine the wall time
// grows with the load while the CPU time stays near what the work
// costs.
type cpuMeter struct{ start time.Duration }

func startCPU() cpuMeter { return cpuMeter{cpuTime()} }

func (m cpuMeter) report(b *testing.B, units int, unit string) {
	b.ReportMetric(float64(cpuTime()-m.start)/1e6/float64(units), "cpu-ms/"+unit)
}

// maxRSSMB is the process's peak resident set (Linux: ru_maxrss in KiB);
// it covers everything the test binary did before, so it is meaningful
// when one benchmark runs alone.
func maxRSSMB() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Maxrss) / 1024
}

// benchFuse runs Fuse on a sweep from disk, end to end, and reports the
// stage timings of its report, the peak heap and frames per second.
func benchFuse(b *testing.B, dir string) {
	sw, err := LoadSweep(dir)
	if err != nil {
		b.Fatal(err)
	}
	var res *FuseResult
	var peak uint64
	b.ResetTimer()
	cpu := startCPU()
	for i := 0; i < b.N; i++ {
		p := peakHeap(func() {
			res, err = Fuse(context.Background(), sw, DefaultFuseOptions())
		})
		if err != nil {
			b.Fatal(err)
		}
		peak = max(peak, p)
	}
	b.StopTimer()
	cpu.report(b, b.N, "op")
	perOp := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(float64(res.Report.FramesUsed)/perOp, "frames/s")
	b.ReportMetric(float64(peak)/(1<<20), "MB-peak-heap")
	b.ReportMetric(maxRSSMB(), "MB-maxrss")
	b.ReportMetric(float64(res.Report.Blocks), "blocks")
	for _, k := range []string{"support", "integrate", "extract", "clean"} {
		if d, err := time.ParseDuration(res.Report.Timings[k]); err == nil {
			b.ReportMetric(float64(d.Milliseconds()), "ms-"+k)
		}
	}
}

// BenchmarkFuseTurntable runs the whole Fuse of the 72-frame turntable
// sweep from its PNG files (axis estimated), the unit of batch
// onboarding.
func BenchmarkFuseTurntable(b *testing.B) {
	benchFuse(b, benchSweep(b, RigTurntable, benchTurntableFrames))
}

// BenchmarkFuseHandheld runs the whole Fuse of a 120-frame handheld sweep
// without poses (frame-to-model tracking against a 4 mm scene volume),
// from its PNG files; frames/s is the figure against the target of 15
// on two cores.
func BenchmarkFuseHandheld(b *testing.B) {
	benchFuse(b, benchSweep(b, RigHandheld, benchHandheldFrames))
}

// handheldFrames decodes the 120-frame handheld sweep with its true
// poses (truth/poses.json) and the region of interest Fuse would set
// from its first frame.
type handheldData struct {
	frames []*Frame
	truth  []mesh.Pose
	roi    ROI
}

var hhCache struct {
	sync.Mutex
	d *handheldData
}

func handheldFrames(b *testing.B) *handheldData {
	b.Helper()
	hhCache.Lock()
	defer hhCache.Unlock()
	if hhCache.d != nil {
		return hhCache.d
	}
	dir := benchSweep(b, RigHandheld, benchHandheldFrames)
	sw, err := LoadSweep(dir)
	if err != nil {
		b.Fatal(err)
	}
	tp, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
	if err != nil {
		b.Fatal(err)
	}
	d := &handheldData{}
	for _, idx := range sw.Usable() {
		fr, err := sw.Frame(idx)
		if err != nil {
			b.Fatal(err)
		}
		d.frames = append(d.frames, fr)
		d.truth = append(d.truth, tp.CamToWorld[idx])
	}
	opt := DefaultFuseOptions()
	sup, err := FindSupport(d.frames[0].Depth, d.frames[0].Intr, opt.Support)
	if err != nil {
		b.Fatal(err)
	}
	f := &fuser{opt: opt, sup: sup, rep: &FuseReport{}}
	f.setROI(sup.Plane.Transform(d.truth[0]), d.truth[0].Apply(sup.Centre), sup.Radius)
	d.roi = f.roi
	hhCache.d = d
	return d
}

// BenchmarkHandheldLoop times the per-frame work of Fuse's handheld
// loop on decoded frames: track the frame against the scene volume's
// raycast and its colour against the keyframe's (predicted at constant
// velocity from the two previous poses), weights and mask, integrate
// the part volume (2 mm) and the scene volume (4 mm), and raycast the
// model for the next frame (Fuse now integrates the part volume after
// its pose graph, from the frames' kept regions: the same work a frame,
// done later; the graph is BenchmarkPoseGraph's). As in Fuse, frames
// are integrated and the model raycast at their tracked poses (the
// raycast then starts near the depth the frame measured); a frame
// whose tracking is lost is
// integrated at its true pose, so the work done does not depend on
// whether tracking holds. "tracked" counts the frames whose tracking
// was not lost, and "worst-mm" is the worst tracked camera position
// against truth.
// frames/s is the figure against the target of 15 on two cores (PNG
// decoding, which Fuse prefetches on other goroutines, is left out;
// see BenchmarkFrameStages/decode).
func BenchmarkHandheldLoop(b *testing.B) {
	d := handheldFrames(b)
	ctx := context.Background()
	opt := DefaultFuseOptions()
	wo := opt.Weights
	wo.BehindMin = 1.75 * opt.TSDF.VoxelSize
	tracked, worst := 0, 0.0
	var f *fuser
	b.ResetTimer()
	cpu := startCPU()
	for i := 0; i < b.N; i++ {
		part, err := NewVolume(opt.TSDF)
		if err != nil {
			b.Fatal(err)
		}
		scene, err := NewVolume(opt.sceneTSDF())
		if err != nil {
			b.Fatal(err)
		}
		tr, err := NewTracker(scene, d.frames[0].Intr, opt.Track)
		if err != nil {
			b.Fatal(err)
		}
		f = &fuser{opt: opt, roi: d.roi, part: part}
		tracked, worst = 0, 0
		var lum []float32
		poses := make([]mesh.Pose, len(d.frames))
		for k, fr := range d.frames {
			lum = Luminance(fr.Color, lum)
			newKey := k == 0
			pose := d.truth[k]
			if k > 0 {
				pred := poses[k-1]
				if k > 1 {
					pred = pred.Mul(poses[k-2].Inv().Mul(pred)) // constant velocity, as Fuse predicts
				}
				res, err := tr.TrackColor(ctx, fr.Depth, lum, nil, pred)
				if err != nil {
					b.Fatal(err)
				}
				if !res.Lost {
					tracked++
					pose = res.CamToWorld
					worst = math.Max(worst, r3.Norm(r3.Sub(pose.T, d.truth[k].T)))
				}
				newKey = res.KeyOverlap < opt.Track.KeyframeOverlap
			}
			poses[k] = pose
			f.alloc = f.mask(fr, pose, f.alloc)
			im := fr.DepthImage()
			f.weights, f.behind = MeasurementBands(fr.Depth, fr.Intr, wo, f.weights, f.behind, true)
			im.Weight, im.Behind, im.Alloc = f.weights, f.behind, f.alloc
			if _, err := part.Integrate(ctx, im, pose); err != nil {
				b.Fatal(err)
			}
			if err := f.integrateScene(ctx, scene, fr, pose); err != nil {
				b.Fatal(err)
			}
			tr.UpdateModel(ctx, pose)
			if newKey {
				tr.SetKeyframe(lum, fr.Depth, pose)
			}
		}
	}
	b.StopTimer()
	cpu.report(b, b.N*len(d.frames), "frame")
	b.ReportMetric(float64(b.N*len(d.frames))/b.Elapsed().Seconds(), "frames/s")
	b.ReportMetric(float64(tracked), "tracked")
	b.ReportMetric(worst*1000, "worst-mm")
	b.ReportMetric(float64(f.part.NumBlocks()), "blocks")
}

// BenchmarkRaycast raycasts, at the tracker's model scale (160×120 since
// TrackOptions.ModelScale became 4; 320×240 before), the 4 mm scene
// volume of the handheld loop after its first 30 frames (integrated at
// their true poses), from the 30th frame's pose.
func BenchmarkRaycast(b *testing.B) {
	d := handheldFrames(b)
	ctx := context.Background()
	opt := DefaultFuseOptions()
	scene, err := NewVolume(opt.sceneTSDF())
	if err != nil {
		b.Fatal(err)
	}
	const n = 30
	f := &fuser{opt: opt}
	for k, fr := range d.frames[:n] {
		if err := f.integrateScene(ctx, scene, fr, d.truth[k]); err != nil {
			b.Fatal(err)
		}
	}
	intr := d.frames[0].Intr.Scaled(opt.Track.ModelScale)
	var m *ModelMap
	b.ReportAllocs()
	b.ResetTimer()
	cpu := startCPU()
	for i := 0; i < b.N; i++ {
		m = scene.Raycast(ctx, intr, d.truth[n-1], m)
	}
	b.StopTimer()
	cpu.report(b, b.N, "op")
	hits := 0
	for i := range m.Points {
		if m.Valid(i) {
			hits++
		}
	}
	b.ReportMetric(float64(hits), "hits")
	b.ReportMetric(float64(scene.NumBlocks()), "blocks")
}

// BenchmarkPoseGraph times the pose graph Fuse runs after tracking a
// handheld sweep (registrations of node pairs, then the Gauss–Newton
// solve with outlier removal) on the 120-frame bench sweep: nodes where
// Fuse would take them, at their true poses moved by a random walk of
// up to 0.3 mm / 0.02° a frame (the drift the graph takes out), each
// with the scene volume's raycast after its frame was fused at its
// true pose. "drift-mm" is the nodes' worst position error before the
// graph, "worst-mm" after.
func BenchmarkPoseGraph(b *testing.B) {
	d := handheldFrames(b)
	ctx := context.Background()
	opt := DefaultFuseOptions()
	scene, err := NewVolume(opt.sceneTSDF())
	if err != nil {
		b.Fatal(err)
	}
	tr, err := NewTracker(scene, d.frames[0].Intr, opt.Track)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	var nodes []graphNode
	f := &fuser{opt: opt}
	drift := mesh.Identity()
	for k, fr := range d.frames {
		if err := f.integrateScene(ctx, scene, fr, d.truth[k]); err != nil {
			b.Fatal(err)
		}
		if k > 0 {
			drift = smallMotion(rng, 0.0003, 0.02*math.Pi/180).Mul(drift)
		}
		pose := drift.Mul(d.truth[k])
		if !opt.Loop.isNode(nodes, pose) {
			continue
		}
		tr.UpdateModel(ctx, d.truth[k])
		nodes = append(nodes, graphNode{placed: k, pose: pose, depth: fr.Depth, lum: Luminance(fr.Color, nil),
			model: compactModel(tr.model, d.truth[k])})
	}
	var before float64
	for _, n := range nodes {
		before = math.Max(before, r3.Norm(r3.Sub(n.pose.T, d.truth[n.placed].T)))
	}
	var worst float64
	var edges int
	b.ResetTimer()
	cpu := startCPU()
	for i := 0; i < b.N; i++ {
		g := &poseGraph{nodes: nodes}
		if err := g.build(ctx, d.frames[0].Intr, opt.Track, opt.Loop, 0); err != nil {
			b.Fatal(err)
		}
		poses, _, err := g.optimise(opt.Loop)
		if err != nil {
			b.Fatal(err)
		}
		edges = len(g.edges)
		worst = 0
		for k, p := range poses {
			worst = math.Max(worst, r3.Norm(r3.Sub(p.T, d.truth[nodes[k].placed].T)))
		}
	}
	cpu.report(b, b.N, "graph")
	b.ReportMetric(float64(len(nodes)), "nodes")
	b.ReportMetric(float64(edges), "edges")
	b.ReportMetric(before*1000, "drift-mm")
	b.ReportMetric(worst*1000, "worst-mm")
}
