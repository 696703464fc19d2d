package reconstruct

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
	"github.com/scanfold/scanfold/mesh/render"
)

// SynthOptions controls Synth. Start from DefaultSynthOptions.
type SynthOptions struct {
	// Rig is RigTurntable (fixed camera, the part turning on a plate)
	// or RigHandheld (the part on a table, the camera circling it).
	// DEFAULT: RigTurntable.
	Rig Rig
	// Frames is the number of frames: for a turntable, the plate turns
	// 360°/Frames between frames; a handheld camera goes once around.
	// DEFAULT: 36.
	Frames int
	// Seed drives every random choice (clutter, part yaw, camera wobble,
	// sensor noise, lighting); the same seed gives the same sweep,
	// whatever the number of workers. DEFAULT: 1.
	Seed uint64
	// Intrinsics of the simulated camera. DEFAULT:
	// mesh.DefaultIntrinsics() (640×480, f = 525 px).
	Intrinsics mesh.Intrinsics
	// Distance from the camera to the plate centre (turntable) or the
	// mean distance to the part's mid-height (handheld, swinging ±20 %),
	// metres. DEFAULT: 0.55, which keeps the near edge of a 0.28 m plate
	// seen from 30° beyond the 0.4 m minimum range of the default noise
	// model.
	Distance float64
	// Elevation is how far the camera looks down, radians above the
	// support plane (handheld: the mean, swinging ±12°).
	// DEFAULT: 30°.
	Elevation float64
	// PlateDiameter and PlateThickness size the turntable plate, metres.
	// DEFAULT: 0.28 and 0.006.
	PlateDiameter, PlateThickness float64
	// Noise is the sensor model applied to every frame; render.NoNoise()
	// gives clean frames. DEFAULT: render.DefaultNoiseOptions().
	Noise render.NoiseOptions
	// Light is the shading for frame 0; the light stays fixed in the
	// room and Noise varies gain, white balance and direction per frame.
	// DEFAULT: render.DefaultOptions().
	Light render.Options
	// DepthUnit is metres per depth-PNG count. DEFAULT: 0.001.
	DepthUnit float64
	// FrameInterval is the time between frames in seconds, written as
	// time_s. DEFAULT: 2 s for a turntable (turn and settle), 0.2 s
	// handheld; 0 means the default for the rig.
	FrameInterval float64
	// WriteAxis writes the true turntable axis into the manifest as
	// its calibration. DEFAULT: false (the pipeline has to find it; the
	// truth keeps it).
	WriteAxis bool
	// Overwrite replaces an existing sweep folder at the target (only a
	// folder holding a sweep.json, or an empty one). DEFAULT: false.
	Overwrite bool
	// Workers is the number of frames rendered at once; 0 means
	// runtime.GOMAXPROCS(0). DEFAULT: 0.
	Workers int
	// PartName names the part in the manifest's provenance. DEFAULT: "".
	PartName string
	// Progress, when not nil, is called after each frame is written,
	// from one goroutine at a time. DEFAULT: nil.
	Progress func(done, total int)
}

// DefaultSynthOptions returns the defaults documented on SynthOptions.
func DefaultSynthOptions() SynthOptions {
	return SynthOptions{
		Rig:            RigTurntable,
		Frames:         36,
		Seed:           1,
		Intrinsics:     mesh.DefaultIntrinsics(),
		Distance:       0.55,
		Elevation:      30 * math.Pi / 180,
		PlateDiameter:  0.28,
		PlateThickness: 0.006,
		Noise:          render.DefaultNoiseOptions(),
		Light:          render.DefaultOptions(),
		DepthUnit:      DefaultDepthUnit,
	}
}

// DefaultPartSpacing is the lattice spacing at which SynthPartMesh
// meshes a demo part: 1 mm, about one pixel's footprint at 0.5 m with
// a 525 px focal length.
const DefaultPartSpacing = 0.001

func (o *SynthOptions) validate() error {
	bad := func(name string, v any, want string) error {
		return fmt.Errorf("reconstruct: synth option %s = %v, want %s", name, v, want)
	}
	switch {
	case o.Rig != RigTurntable && o.Rig != RigHandheld:
		return bad("Rig", o.Rig, `"turntable" or "handheld"`)
	case o.Frames < 1 || o.Frames > MaxFrames:
		return bad("Frames", o.Frames, fmt.Sprintf("1..%d", MaxFrames))
	case !(o.Distance >= 0.2 && o.Distance <= 3):
		return bad("Distance", o.Distance, "0.2..3 m")
	case !(o.Elevation >= 5*math.Pi/180 && o.Elevation <= 75*math.Pi/180):
		return bad("Elevation", o.Elevation, "5°..75° in radians")
	case !(o.PlateDiameter >= 0.05 && o.PlateDiameter <= 1):
		return bad("PlateDiameter", o.PlateDiameter, "0.05..1 m")
	case !(o.PlateThickness > 0 && o.PlateThickness <= 0.05):
		return bad("PlateThickness", o.PlateThickness, "(0, 0.05] m")
	case !(o.DepthUnit >= MinDepthUnit && o.DepthUnit <= MaxDepthUnit):
		return bad("DepthUnit", o.DepthUnit, fmt.Sprintf("[%g, %g] m", MinDepthUnit, MaxDepthUnit))
	case !(o.FrameInterval >= 0) || math.IsInf(o.FrameInterval, 0):
		return bad("FrameInterval", o.FrameInterval, "≥ 0 s")
	case o.Workers < 0:
		return bad("Workers", o.Workers, "≥ 0")
	}
	if o.Rig == RigHandheld && o.Elevation+12*math.Pi/180 >= math.Pi/2 {
		return bad("Elevation", o.Elevation, "below 78° for a handheld orbit")
	}
	if err := o.Intrinsics.Validate(); err != nil {
		return fmt.Errorf("reconstruct: synth option Intrinsics: %w", err)
	}
	if int64(o.Intrinsics.Width)*int64(o.Intrinsics.Height) > MaxPixels {
		return bad("Intrinsics", fmt.Sprintf("%d×%d", o.Intrinsics.Width, o.Intrinsics.Height), fmt.Sprintf("at most %d pixels", MaxPixels))
	}
	if err := o.Noise.Validate(); err != nil {
		return fmt.Errorf("reconstruct: synth option Noise: %w", err)
	}
	if err := o.Light.Validate(); err != nil {
		return fmt.Errorf("reconstruct: synth option Light: %w", err)
	}
	return nil
}

// SynthReport summarises a written synthetic sweep.
type SynthReport struct {
	// Dir is the sweep folder written.
	Dir string
	// Frames is the number of frames; Intrinsics their camera.
	Frames     int
	Intrinsics mesh.Intrinsics
	// ValidFraction is the mean share of pixels with a depth
	// measurement; PartFraction the mean share that measure the part.
	ValidFraction, PartFraction float64
	// DepthMin and DepthMax bound the measured depths, metres.
	DepthMin, DepthMax float64
	// PartSize is the part's extent along x, y, z of its own frame.
	PartSize r3.Vec
	// PartTriangles and SeenTriangles count the part's triangles and
	// those that at least one frame measured (truth/seen.ply).
	PartTriangles, SeenTriangles int
}

// SynthPartMesh meshes the demo part called name (see mesh/parts) at
// the given lattice spacing (DefaultPartSpacing when 0; 0.1 mm to
// 10 mm): its signed distance is sampled on a lattice covering the
// part with 1.5 spacings to spare, so the surface comes out closed,
// the zero level set is extracted by marching cubes (mesh.SampleGrid,
// mesh.MarchingCubes), and each vertex takes the part's colour at that
// vertex, which lies on the surface to within the interpolation error,
// so printed edges stay sharp.
func SynthPartMesh(name string, spacing float64) (*mesh.Mesh, error) {
	if spacing == 0 {
		spacing = DefaultPartSpacing
	}
	if !(spacing >= 1e-4 && spacing <= 0.01) {
		return nil, fmt.Errorf("reconstruct: part mesh spacing %v m, want 0.1 mm to 10 mm", spacing)
	}
	p, err := parts.Get(name)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: %w", err)
	}
	b := p.Bounds(1.5 * spacing)
	g, err := mesh.SampleGrid(p.SDF, nil, b.Min, b.Max, spacing)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: meshing %s: %w", name, err)
	}
	m, err := mesh.MarchingCubes(g, 0)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: meshing %s: %w", name, err)
	}
	m.Colors = make([]mesh.RGB, len(m.Vertices))
	for i, v := range m.Vertices {
		m.Colors[i] = p.Color(v)
	}
	return m, nil
}

// LoadPartMesh reads a part mesh (PLY, STL or OBJ) and scales it by
// unit, the file's length unit in metres (0.001 for a file in
// millimetres, 1 for metres).
func LoadPartMesh(path string, unit float64) (*mesh.Mesh, error) {
	if !(unit > 0) || math.IsInf(unit, 0) {
		return nil, fmt.Errorf("reconstruct: mesh unit %v, want a positive number of metres", unit)
	}
	m, err := mesh.LoadMesh(path)
	if err != nil {
		return nil, err
	}
	if err := m.Validate(); err != nil {
		return nil, fmt.Errorf("reconstruct: %s: %w", path, err)
	}
	if unit != 1 {
		for i := range m.Vertices {
			m.Vertices[i] = r3.Scale(unit, m.Vertices[i])
		}
	}
	return m, nil
}

// Synth renders a synthetic sweep of part (a mesh in metres, +z up;
// it is stood on its lowest point and centred on the support) and
// writes it to dir as a sweep folder with ground truth under truth/.
// The folder appears complete or not at all: everything is written
// into a temporary folder beside dir and renamed at the end, and a
// cancelled ctx or an error removes it.
func Synth(ctx context.Context, dir string, part *mesh.Mesh, opt SynthOptions) (*SynthReport, error) {
	if err := opt.validate(); err != nil {
		return nil, err
	}
	if part == nil {
		return nil, errors.New("reconstruct: synth needs a part mesh")
	}
	if err := part.Validate(); err != nil {
		return nil, fmt.Errorf("reconstruct: part mesh: %w", err)
	}
	if opt.FrameInterval == 0 {
		opt.FrameInterval = 2
		if opt.Rig == RigHandheld {
			opt.FrameInterval = 0.2
		}
	}
	if opt.Workers == 0 {
		opt.Workers = runtime.GOMAXPROCS(0)
	}
	opt.Workers = min(opt.Workers, opt.Frames)
	if err := checkTarget(dir, opt.Overwrite); err != nil {
		return nil, err
	}
	sc, err := buildScene(part, opt)
	if err != nil {
		return nil, err
	}

	parent := filepath.Dir(filepath.Clean(dir))
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return nil, fmt.Errorf("reconstruct: synth: %w", err)
	}
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(filepath.Clean(dir))+".synth-*")
	if err != nil {
		return nil, fmt.Errorf("reconstruct: synth: %w", err)
	}
	done := false
	defer func() {
		if !done {
			os.RemoveAll(tmp)
		}
	}()
	for _, sub := range []string{"color", "depth", "truth"} {
		if err := os.Mkdir(filepath.Join(tmp, sub), 0o755); err != nil {
			return nil, fmt.Errorf("reconstruct: synth: %w", err)
		}
	}

	sy := &synthesizer{sc: sc, opt: opt, part: part, dir: tmp}
	stats, seen, err := sy.renderAll(ctx)
	if err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("reconstruct: synth: %w", err)
	}
	rep, err := sy.writeTruthAndManifest(stats, seen)
	if err != nil {
		return nil, err
	}
	if err := install(tmp, dir, opt.Overwrite); err != nil {
		return nil, err
	}
	done = true
	rep.Dir = dir
	return rep, nil
}

// checkTarget refuses to write over anything but an empty folder or,
// with overwrite, an existing sweep.
func checkTarget(dir string, overwrite bool) error {
	ents, err := os.ReadDir(dir)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("reconstruct: synth target %s: %w", dir, unwrapPath(err))
	}
	if len(ents) == 0 {
		return nil
	}
	if _, err := os.Stat(filepath.Join(dir, ManifestName)); err != nil {
		return fmt.Errorf("reconstruct: synth target %s exists and is not a sweep folder; choose another folder", dir)
	}
	if !overwrite {
		return fmt.Errorf("reconstruct: synth target %s already holds a sweep; choose another folder or allow overwriting", dir)
	}
	return nil
}

// install renames the finished temporary folder to dir, moving an old
// sweep (or empty folder) out of the way first.
func install(tmp, dir string, overwrite bool) error {
	if err := checkTarget(dir, overwrite); err != nil {
		return err
	}
	if _, err := os.Stat(dir); err == nil {
		old := tmp + ".old"
		if err := os.Rename(dir, old); err != nil {
			return fmt.Errorf("reconstruct: synth: moving the old %s aside: %w", dir, err)
		}
		if err := os.Rename(tmp, dir); err != nil {
			os.Rename(old, dir)
			return fmt.Errorf("reconstruct: synth: %w", err)
		}
		return os.RemoveAll(old)
	}
	if err := os.Rename(tmp, dir); err != nil {
		return fmt.Errorf("reconstruct: synth: %w", err)
	}
	return nil
}

// synthesizer renders and writes the frames of one sweep.
type synthesizer struct {
	sc   *scene
	opt  SynthOptions
	part *mesh.Mesh
	dir  string
}

// frameStats are one frame's figures for the report.
type frameStats struct {
	valid, partPx      int
	depthMin, depthMax float64
	hasDepth           bool
}

// worker holds one goroutine's renderer, sensor and buffers.
type worker struct {
	r      *render.Renderer
	sensor *render.Sensor
	clean  render.Frame
	noisy  render.Frame
	objs   []render.Object
	seen   []bool
}

func (sy *synthesizer) newWorker() (*worker, error) {
	r, err := render.NewRenderer(sy.opt.Intrinsics)
	if err != nil {
		return nil, err
	}
	s, err := render.NewSensor(sy.opt.Noise)
	if err != nil {
		return nil, err
	}
	return &worker{r: r, sensor: s, objs: make([]render.Object, len(sy.sc.objects)), seen: make([]bool, len(sy.part.Faces))}, nil
}

// renderAll renders every frame on opt.Workers goroutines. Each frame
// draws from its own random stream (seeded by Seed and the frame
// index), so the output does not depend on which worker renders it.
func (sy *synthesizer) renderAll(ctx context.Context) ([]frameStats, []bool, error) {
	n := sy.opt.Frames
	stats := make([]frameStats, n)
	jobs := make(chan int)
	type result struct {
		i   int
		err error
	}
	results := make(chan result)
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	workers := make([]*worker, sy.opt.Workers)
	for w := range workers {
		wk, err := sy.newWorker()
		if err != nil {
			return nil, nil, err
		}
		workers[w] = wk
	}
	var wg sync.WaitGroup
	for _, wk := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range jobs {
				st, err := sy.frame(i, wk, true)
				if err == nil {
					stats[i] = st
				}
				results <- result{i, err}
			}
		}()
	}
	go func() {
		defer close(jobs)
		for i := 0; i < n; i++ {
			select {
			case jobs <- i:
			case <-ctx.Done():
				return
			}
		}
	}()
	go func() { wg.Wait(); close(results) }()
	var firstErr error
	done := 0
	for res := range results {
		if res.err != nil && firstErr == nil {
			firstErr = res.err
			cancel()
		}
		done++
		if res.err == nil && sy.opt.Progress != nil && firstErr == nil {
			sy.opt.Progress(done, n)
		}
	}
	if firstErr != nil {
		return nil, nil, firstErr
	}
	if err := ctx.Err(); err != nil {
		return nil, nil, fmt.Errorf("reconstruct: synth: %w", err)
	}
	seen := make([]bool, len(sy.part.Faces))
	for _, wk := range workers {
		for f, s := range wk.seen {
			seen[f] = seen[f] || s
		}
	}
	return stats, seen, nil
}

// placeObjects sets every object's ModelToCam for frame i.
func (sy *synthesizer) placeObjects(i int, objs []render.Object) {
	sc := sy.sc
	sToCam := sc.camToS[i].Inv()
	var turn mesh.Pose
	if sc.angles != nil {
		turn = mesh.PoseFromAxisAngle(r3.Vec{Z: 1}, sc.angles[i], r3.Vec{})
	}
	for k, o := range sc.objects {
		p := o.modelToS
		if o.turns {
			p = turn.Mul(p)
		}
		objs[k] = render.Object{Mesh: o.mesh, ModelToCam: sToCam.Mul(p), Color: o.color}
	}
}

// lightFor returns frame i's shading: the room light of frame 0 seen
// from camera i, perturbed by the noise model.
func (sy *synthesizer) lightFor(i int, rng *rand.Rand) render.Options {
	l := sy.opt.Light
	lightS := sy.sc.camToS[0].Rotate(l.LightDir)
	l.LightDir = sy.sc.camToS[i].Inv().Rotate(lightS)
	return render.PerturbLighting(l, sy.opt.Noise, rng)
}

// frame renders and degrades frame i into wk.noisy and, when write,
// writes its PNGs.
func (sy *synthesizer) frame(i int, wk *worker, write bool) (frameStats, error) {
	rng := rand.New(rand.NewPCG(sy.opt.Seed, 0x6672616d65<<16|uint64(i)))
	sy.placeObjects(i, wk.objs)
	light := sy.lightFor(i, rng)
	if err := wk.r.RenderInto(&wk.clean, wk.objs, light); err != nil {
		return frameStats{}, fmt.Errorf("reconstruct: synth frame %d: %w", i, err)
	}
	if err := wk.sensor.Apply(&wk.noisy, &wk.clean, rng); err != nil {
		return frameStats{}, fmt.Errorf("reconstruct: synth frame %d: %w", i, err)
	}
	f := &wk.noisy
	st := frameStats{depthMin: math.Inf(1)}
	for p, z := range f.Depth {
		if z <= 0 {
			continue
		}
		st.valid++
		st.depthMin = math.Min(st.depthMin, float64(z))
		st.depthMax = math.Max(st.depthMax, float64(z))
		if int(f.Object[p]) == sy.sc.part && f.Triangle[p] >= 0 {
			st.partPx++
			wk.seen[f.Triangle[p]] = true
		}
	}
	st.hasDepth = st.valid > 0
	if !write {
		return st, nil
	}
	k := sy.opt.Intrinsics
	if err := writeFileWith(filepath.Join(sy.dir, framePath("depth", i)), func(w *os.File) error {
		_, err := render.WriteDepthPNG(w, f.Depth, k.Width, k.Height, sy.opt.DepthUnit)
		return err
	}); err != nil {
		return frameStats{}, err
	}
	if err := writeFileWith(filepath.Join(sy.dir, framePath("color", i)), func(w *os.File) error {
		return render.WriteColorPNG(w, f.Color)
	}); err != nil {
		return frameStats{}, err
	}
	return st, nil
}

func framePath(kind string, i int) string { return fmt.Sprintf("%s/%06d.png", kind, i) }

// writeFileWith creates path and writes it with write, through a
// buffered writer.
func writeFileWith(path string, write func(*os.File) error) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("reconstruct: synth: %w", err)
	}
	if err := write(f); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("reconstruct: synth: %w", err)
	}
	return nil
}
