package reconstruct

import (
	"context"
	"errors"
	"fmt"
	"image"
	"math"
	"slices"
	"sync"
	"time"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// FuseOptions configures Fuse. Zero fields of nested option structs are
// not defaulted: start from DefaultFuseOptions.
type FuseOptions struct {
	// TSDF is the part volume; its VoxelSize is the mesh's resolution.
	// DEFAULT: DefaultTSDFOptions() (2 mm voxels)
	TSDF TSDFOptions
	// Weights turns each depth pixel into a measurement weight.
	// DEFAULT: DefaultWeightOptions()
	Weights WeightOptions
	// Support finds the plate or table and the part on it in the first
	// frame.
	// DEFAULT: DefaultSupportOptions()
	Support SupportOptions
	// Track places handheld frames, and refines turntable frames.
	// DEFAULT: DefaultTrackOptions()
	Track TrackOptions
	// TrackVoxel is the voxel size of the handheld rig's scene volume,
	// which holds everything in view for tracking (the part volume holds
	// only the region of interest).
	// DEFAULT: 0.004
	TrackVoxel float64
	// TrackMaxDepth bounds the scene volume's depth range (metres).
	// DEFAULT: 1.5
	TrackMaxDepth float64
	// TrackBehind is the band behind each measured surface that a frame
	// updates in the scene volume, in scene voxels across the surface
	// (WeightOptions' BehindMin; the noise model's BehindSigmas·σ_z where
	// that is wider), and along each ray that divided by cos θ at every
	// angle the weights accept (WeightOptions.BehindCos), instead of the
	// whole truncation: a wall thinner than the truncation (the demo
	// bracket's plate, 3 mm against 16 mm), seen from both sides, then
	// keeps both faces in the model tracking raycasts, where each side's
	// band used to carve away the other's surface. With the whole
	// truncation, tracking slid 9–13 mm along the table on the bracket's
	// 120-frame handheld demo sweeps of seeds 1–3 once the camera saw the
	// plate's far side (frames tracked from their true poses against a
	// model fused at true poses slid alike). On 14 sweeps (the five
	// parts at seed 11, seeds 1–3), worst camera error at most / on
	// average / sweeps within 2 mm (pose-graph pairs within 60°): 1.5
	// voxels with the along-ray factor capped at 1/0.7 as for the part
	// 2.87 / 1.96 / 8 (the cap left the table's shell too thin for the
	// raycast where it is seen obliquely: 4705 model pixels hit against
	// 11091 with the whole truncation, 10494 uncapped); uncapped, 1.5
	// voxels 3.60 / 2.01 / 8, 1.25 voxels 2.65 / 1.87 / 7, 1 voxel 3.14 /
	// 1.87 / 10, 0.75 voxel 3.87 / 2.27 / 8; the whole truncation (pairs
	// within 36°) 12.9 / 3.61 / 8. 0 updates the whole truncation.
	// DEFAULT: 1
	TrackBehind float64
	// Loop corrects tracked handheld poses with a pose graph once every
	// frame is placed (LoopOptions), before the part is fused.
	// DEFAULT: DefaultLoopOptions()
	Loop LoopOptions
	// Axis estimates an uncalibrated turntable's axis.
	// DEFAULT: DefaultAxisOptions()
	Axis AxisOptions
	// AxisViews is how many frames the axis is estimated from, each
	// aligned with the first frame both ways.
	// DEFAULT: 6
	AxisViews int
	// PlateAxis places an estimated axis by the plate's texture
	// (EstimateAxisFromPlate), searched around the estimate from the
	// view pairs, from PlateViews frames spread around the turn; where
	// the texture is too weak the view pairs' estimate stands. Zero
	// PlateViews turns it off.
	// DEFAULT: DefaultPlateAxisOptions(), 8 views. On twenty 72-frame
	// demo sweeps the view pairs left the axis 0.15–1.9 mm off (toward
	// the camera, the direction they see least), the plate 0.01–0.15 mm.
	PlateAxis  PlateAxisOptions
	PlateViews int
	// RefineTurntable refines every turntable frame's pose by
	// frame-to-model ICP against the volume so far (masked to the region
	// of interest, damped, and refused beyond MaxRefineShift/Turn), for
	// rigs whose plate angle or axis cannot be trusted (a slipping or
	// wobbling plate). With a sound axis it only adds the noise of single
	// frames: on synthetic 72-frame sweeps of the bracket it raised the
	// mean error from 0.32 to 0.38 mm, so it is off by default.
	// DEFAULT: false
	RefineTurntable bool
	// RefineDamping regularises the turntable refinement (TrackOptions
	// Damping): the plate angle is trusted, so the refinement only takes
	// what the data clearly asks for. A rotationally symmetric part leaves
	// its turn about its axis unconstrained; damping keeps it at the plate
	// angle.
	// DEFAULT: 1e-3
	RefineDamping float64
	// MaxRefine rejects a turntable refinement that moves the frame
	// farther than this from the plate's prediction (metres, radians).
	// DEFAULT: 0.005, 2° (0.0349)
	MaxRefineShift, MaxRefineTurn float64
	// ROIMargin widens the region of interest around the part (metres).
	// DEFAULT: 0.015
	ROIMargin float64
	// MinWeight: voxels with less accumulated weight are treated as
	// unobserved when the mesh is extracted. A weight of 1 is one
	// face-on measurement at 0.5 m (MeasurementWeights); the inside of
	// a bore, seen in a few frames at 50–70° from its rays, gathers
	// 0.2–0.5 a frame. Measured on the 72-frame demo valve sweep at
	// 1.5 mm voxels: 1 leaves its inlet bore open (holes 4.1 % of the
	// surface), 0.5 closes it to the part that faces down (holes
	// 0.85 %) with the same accuracy (mean error 0.955 → 0.947 mm, the
	// bracket 0.431 mm either way).
	// DEFAULT: 0.5
	MinWeight float32
	// CropHeight removes the support surface: the mesh is cut along the
	// plane this far above the support (metres). 0 means 0.75 voxel.
	// DEFAULT: 0
	CropHeight float64
	// MinComponentFraction drops connected pieces smaller than this
	// fraction of the largest one's area (floaters); only the largest is
	// kept when KeepLargest is set.
	// DEFAULT: 0.02, KeepLargest true
	MinComponentFraction float64
	KeepLargest          bool
	// Smooth is the number of Taubin λ|μ iterations (λ = 0.5, μ = −0.53;
	// mesh.SmoothTaubin) run on the extracted surface: they damp the
	// residual sensor noise the fusion leaves (a fraction of a
	// millimetre) without shrinking the part, so that normals, and the
	// point-pair features built on them, are steadier.
	// DEFAULT: 10
	Smooth int
	// Strict makes a frame that cannot be used (bad image, lost
	// tracking) an error instead of a skip.
	// DEFAULT: false
	Strict bool
	// Prefetch is how many frames are decoded ahead, in parallel, while
	// earlier ones are fused.
	// DEFAULT: 4
	Prefetch int
	// KeepBytes bounds the memory (bytes) that a tracked handheld sweep
	// keeps of its frames for fusing the part once the pose graph has
	// corrected their poses: the part's region of each frame, depth and
	// colour (on the 640×480 demo sweeps about a quarter of the frame,
	// 0.5–0.7 MB: 72–87 MB for 120 frames); frames beyond it are decoded
	// again. 0 decodes them all again.
	// DEFAULT: 256 MiB
	KeepBytes int64
	// Progress, when set, is called as work advances.
	Progress func(stage string, done, total int)
}

// DefaultFuseOptions returns the documented defaults.
func DefaultFuseOptions() FuseOptions {
	return FuseOptions{
		TSDF:                 DefaultTSDFOptions(),
		Weights:              DefaultWeightOptions(),
		Support:              DefaultSupportOptions(),
		Track:                handheldTrackOptions(),
		TrackVoxel:           0.004,
		TrackMaxDepth:        1.5,
		TrackBehind:          1,
		Loop:                 DefaultLoopOptions(),
		Axis:                 DefaultAxisOptions(),
		AxisViews:            6,
		PlateAxis:            DefaultPlateAxisOptions(),
		PlateViews:           8,
		RefineDamping:        1e-2,
		MaxRefineShift:       0.0015,
		MaxRefineTurn:        0.5 * math.Pi / 180,
		ROIMargin:            0.015,
		MinWeight:            0.5,
		MinComponentFraction: 0.02,
		KeepLargest:          true,
		Smooth:               10,
		Prefetch:             4,
		KeepBytes:            256 << 20,
	}
}

// sceneTSDF returns the options of the handheld rig's scene volume,
// which tracking raycasts: the part's, at TrackVoxel, with the default
// truncation and reaching TrackMaxDepth.
func (o FuseOptions) sceneTSDF() TSDFOptions {
	so := o.TSDF
	so.VoxelSize, so.Truncation, so.MaxDepth = o.TrackVoxel, 0, o.TrackMaxDepth
	return so
}

// sceneBands returns a frame's weights for the scene volume and, with
// TrackBehind, its bands behind the surface (nil without); w and b are
// reused when they have the right length.
func (o FuseOptions) sceneBands(depth []float32, intr mesh.Intrinsics, w, b []float32) ([]float32, []float32) {
	wo := o.Weights
	wo.Region = image.Rectangle{}
	wo.MaxDepth = o.sceneTSDF().MaxDepth
	if !(o.TrackBehind > 0) {
		return MeasurementWeights(depth, intr, wo, w), nil
	}
	wo.BehindMin = o.TrackBehind * o.TrackVoxel
	// The band keeps its thickness across the surface at every angle the
	// weights accept, so that oblique surfaces (the table) keep the
	// shell a raycast's trilinear samples need.
	wo.BehindCos = math.Cos(wo.MaxAngle)
	return MeasurementBands(depth, intr, wo, w, b, true)
}

// handheldTrackOptions are DefaultTrackOptions with the colour term on:
// ColorSigma 3, the standard deviation of the difference of two 8-bit
// readings each with the sensor model's colour noise of σ = 2 (2·√2 ≈
// 2.8). On a 120-frame handheld valve sweep (seed 11) the worst camera
// error against truth fell from 8.9 mm / 1.24° (depth alone) to
// 1.7–2.0 mm / 0.11–0.22° for ColorSigma 2–8.
func handheldTrackOptions() TrackOptions {
	o := DefaultTrackOptions()
	o.ColorSigma = 3
	o.ColorSubsample = 2
	o.DepthFilter = 2
	return o
}

// ROI is the region of interest: an upright cylinder standing on the
// support, in the world frame. A point belongs when its height above
// Plane lies in [Bottom, Top] and its distance from the line through
// Centre along Plane.Normal is at most Radius.
type ROI struct {
	Plane       Plane
	Centre      r3.Vec
	Radius      float64
	Bottom, Top float64
}

// Contains reports whether p lies in the region.
func (r ROI) Contains(p r3.Vec) bool {
	h := r.Plane.Distance(p)
	if h < r.Bottom || h > r.Top {
		return false
	}
	d := r3.Sub(p, r.Centre)
	d = r3.Sub(d, r3.Scale(r3.Dot(d, r.Plane.Normal), r.Plane.Normal))
	return r3.Norm2(d) <= r.Radius*r.Radius
}

// SkippedFrame is a frame left out of the fusion, with the reason.
type SkippedFrame struct {
	Frame  int    `json:"frame"`
	Reason string `json:"reason"`
}

// FuseReport tells what Fuse did.
type FuseReport struct {
	Rig        Rig            `json:"rig"`
	Frames     int            `json:"frames"`
	FramesUsed int            `json:"frames_used"`
	Skipped    []SkippedFrame `json:"skipped,omitempty"`
	VoxelSize  float64        `json:"voxel_size_m"`
	AxisSource string         `json:"axis_source,omitempty"` // "calibrated" or "estimated" (turntable)
	Axis       *Axis          `json:"axis,omitempty"`
	AxisRMS    float64        `json:"axis_rms_m,omitempty"`
	// AxisMethod says how an estimated axis was placed: "plate texture"
	// or "view pairs"; PlateCorrelation is the plate texture's
	// correlation at its estimate (DefaultPlateAxisOptions needs 0.6),
	// AxisShift how far the plate moved the view pairs' estimate (m).
	AxisMethod       string  `json:"axis_method,omitempty"`
	PlateCorrelation float64 `json:"plate_correlation,omitempty"`
	AxisShift        float64 `json:"axis_shift_m,omitempty"`
	Refined          int     `json:"refined_frames,omitempty"`
	RefineMean       float64 `json:"refine_mean_shift_m,omitempty"`
	// GraphNodes, GraphEdges and GraphDropped describe the pose graph
	// of a tracked handheld sweep (LoopOptions): nodes, edges kept
	// (registrations and tracking's relative poses between consecutive
	// nodes) and registrations dropped as outliers; GraphCorrection is
	// the largest move of a camera it made (metres).
	GraphNodes      int     `json:"graph_nodes,omitempty"`
	GraphEdges      int     `json:"graph_edges,omitempty"`
	GraphDropped    int     `json:"graph_edges_dropped,omitempty"`
	GraphCorrection float64 `json:"graph_correction_m,omitempty"`
	Support         Plane   `json:"-"`
	ROI             ROI     `json:"-"`
	Blocks          int     `json:"blocks"`
	Vertices        int     `json:"vertices"`
	Triangles       int     `json:"triangles"`
	CropRemoved     int     `json:"support_triangles_removed"`
	// CropHeight is how far above the support the surface was cut
	// (metres): the model's rim where the part stood lies on the plane
	// Support moved up by it.
	CropHeight float64 `json:"crop_height_m"`
	Components int     `json:"components_removed"`
	Area       float64 `json:"area_m2"`
	Volume     float64 `json:"volume_m3"` // enclosed volume; meaningful when Watertight
	Watertight bool    `json:"watertight"`
	Boundary   float64 `json:"boundary_length_m"`
	// CamToWorld holds the pose used for each frame (frame order); frames
	// that were skipped hold the identity and appear in Skipped.
	CamToWorld []mesh.Pose       `json:"-"`
	Timings    map[string]string `json:"timings"`
}

// FuseResult is the fused part.
type FuseResult struct {
	// Mesh is the part's coloured surface in the sweep's world frame (the
	// camera frame of its first frame), with per-vertex normals.
	Mesh   *mesh.Mesh
	Report FuseReport
}

// ErrDepthScale is wrapped when the depth values cannot be those of a
// part scan: the depth unit in the manifest is almost certainly wrong.
var ErrDepthScale = errors.New("depth scale does not fit a part scan")

// Fuse turns a sweep into the part's coloured, cleaned mesh: it finds
// the support and the part in the first usable frame, places every
// frame (turntable: the plate angle about a calibrated axis, or one
// estimated from the plate's plane, pairs of views and the plate's
// texture, optionally refined by ICP against the model so far;
// handheld: the given poses, or frame-to-model tracking of depth and
// colour), integrates the region of interest
// into a sparse TSDF, extracts the zero level set by marching cubes,
// removes the support surface and floaters, and keeps the part.
func Fuse(ctx context.Context, sw *Sweep, opt FuseOptions) (*FuseResult, error) {
	start := time.Now()
	timings := map[string]string{}
	mark := func(name string, since time.Time) { timings[name] = time.Since(since).Round(time.Millisecond).String() }
	rep := FuseReport{Rig: sw.Manifest.Rig, Frames: sw.NumFrames(), VoxelSize: opt.TSDF.VoxelSize}
	rep.CamToWorld = make([]mesh.Pose, sw.NumFrames())
	for i := range rep.CamToWorld {
		rep.CamToWorld[i] = mesh.Identity()
	}
	for _, fe := range sw.Skipped {
		rep.Skipped = append(rep.Skipped, SkippedFrame{Frame: fe.Frame, Reason: fe.Error()})
	}
	usable := sw.Usable()
	if len(usable) == 0 {
		return nil, fmt.Errorf("reconstruct: %s: no usable frames (%d skipped)", sw.Dir, len(sw.Skipped))
	}
	f := &fuser{sw: sw, opt: opt, rep: &rep}
	t0 := time.Now()
	first, err := sw.Frame(usable[0])
	if err != nil {
		return nil, err
	}
	if err := checkDepthScale(first, sw.Manifest.DepthUnit); err != nil {
		return nil, fmt.Errorf("reconstruct: %s: frame %d: %w", sw.Dir, first.Index, err)
	}
	sup, err := FindSupport(first.Depth, first.Intr, opt.Support)
	if err != nil {
		if errors.Is(err, ErrNoPart) {
			return nil, fmt.Errorf("reconstruct: %s: frame %d: %w (looked for a plane under the image centre with something %.0f–%.0f mm above it)", sw.Dir, first.Index, ErrNoPart, opt.Support.MinHeight*1000, opt.Support.MaxHeight*1000)
		}
		return nil, fmt.Errorf("reconstruct: %s: frame %d: %w", sw.Dir, first.Index, err)
	}
	f.first, f.sup = first, sup
	// The world frame is the first frame's camera frame (for a turntable
	// the camera never moves, so it is every frame's camera frame).
	var worldFromFirst mesh.Pose = mesh.Identity()
	if first.HasPose {
		worldFromFirst = first.CamToWorld
	}
	rep.Support = sup.Plane.Transform(worldFromFirst)
	mark("support", t0)

	f.part, err = NewVolume(opt.TSDF)
	if err != nil {
		return nil, err
	}
	switch sw.Manifest.Rig {
	case RigTurntable:
		err = f.turntable(ctx, worldFromFirst)
	default:
		err = f.handheld(ctx, worldFromFirst)
	}
	if err != nil {
		return nil, err
	}
	mark("integrate", t0)
	if f.graphTime > 0 {
		timings["pose graph"] = f.graphTime.Round(time.Millisecond).String()
	}
	if rep.FramesUsed == 0 {
		return nil, fmt.Errorf("reconstruct: %s: every frame was skipped", sw.Dir)
	}

	t1 := time.Now()
	m, err := f.part.Extract(opt.MinWeight)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: %s: %w", sw.Dir, err)
	}
	rep.Blocks = f.part.NumBlocks()
	mark("extract", t1)
	t2 := time.Now()
	m, err = f.cleanUp(m)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: %s: %w", sw.Dir, err)
	}
	mark("clean", t2)
	rep.Vertices, rep.Triangles = len(m.Vertices), len(m.Faces)
	rep.Area = m.Area()
	rep.Watertight = m.IsWatertight()
	if rep.Watertight {
		rep.Volume = m.SignedVolume()
	}
	rep.Boundary = m.BoundaryLength()
	mark("total", start)
	rep.Timings = timings
	return &FuseResult{Mesh: m, Report: rep}, nil
}

// fuser holds the state of one Fuse call.
type fuser struct {
	sw    *Sweep
	opt   FuseOptions
	rep   *FuseReport
	first *Frame
	sup   Support
	part  *Volume
	roi   ROI
	// scratch reused from frame to frame
	alloc           []bool
	weights, behind []float32
	// the scene volume's weights and bands (FuseOptions.sceneBands)
	sceneWeights, sceneBehind []float32
	// graphTime is the time the pose graph took once tracking ended
	// (the registrations left, and the solve), part of the "integrate"
	// stage's
	graphTime time.Duration
}

func (f *fuser) progress(stage string, done, total int) {
	if f.opt.Progress != nil {
		f.opt.Progress(stage, done, total)
	}
}

// skip records a frame left out, or fails in strict mode.
func (f *fuser) skip(frame int, reason string) error {
	if f.opt.Strict {
		return fmt.Errorf("reconstruct: %s: frame %d: %s (strict mode)", f.sw.Dir, frame, reason)
	}
	f.rep.Skipped = append(f.rep.Skipped, SkippedFrame{Frame: frame, Reason: reason})
	return nil
}

// setROI builds the region of interest around the part, world frame:
// an upright cylinder about centre reaching radius beyond it.
func (f *fuser) setROI(plane Plane, centre r3.Vec, radius float64) {
	vs := f.opt.TSDF.VoxelSize
	f.roi = ROI{
		Plane:  plane,
		Centre: centre,
		Radius: radius + f.opt.ROIMargin,
		// Allocation starts 1.5 voxels above the support so the support
		// itself does not fill the volume; blocks reaching down to it are
		// still updated from every pixel, which closes the part's foot.
		Bottom: 1.5 * vs,
		Top:    f.sup.Height + f.opt.ROIMargin,
	}
	f.rep.ROI = f.roi
}

// masks returns, for a frame placed at camToWorld, the pixels whose
// world point lies in the region of interest.
func (f *fuser) mask(fr *Frame, camToWorld mesh.Pose, dst []bool) []bool {
	return f.roi.Mask(fr.Depth, fr.Intr, camToWorld, dst)
}

// prefetch decodes the frames in order, up to opt.Prefetch ahead, on
// parallel goroutines; next() returns them in order.
type prefetcher struct {
	slots   []chan frameOrErr
	next    int
	release func()
	cancel  context.CancelFunc
	done    chan struct{} // closed once no decoding goroutine is left
}

type frameOrErr struct {
	f   *Frame
	err error
}

func (f *fuser) prefetch(ctx context.Context, frames []int) *prefetcher {
	p := &prefetcher{slots: make([]chan frameOrErr, len(frames))}
	for i := range p.slots {
		p.slots[i] = make(chan frameOrErr, 1)
	}
	ahead := max(1, f.opt.Prefetch)
	sem := make(chan struct{}, ahead)
	ctx, p.cancel = context.WithCancel(ctx)
	p.done = make(chan struct{})
	go func() {
		defer close(p.done)
		var wg sync.WaitGroup
		for i, idx := range frames {
			select {
			case sem <- struct{}{}:
			case <-ctx.Done():
				for _, s := range p.slots[i:] {
					s <- frameOrErr{err: ctx.Err()}
				}
				wg.Wait()
				return
			}
			wg.Add(1)
			go func(i, idx int) {
				defer wg.Done()
				fr, err := f.sw.Frame(idx)
				p.slots[i] <- frameOrErr{fr, err}
			}(i, idx)
		}
		wg.Wait()
	}()
	// The consumer releases a semaphore slot each time it takes a frame.
	p.release = func() { <-sem }
	return p
}

// stop ends the prefetching (a caller that returns before taking every
// frame) and waits for its goroutines.
func (p *prefetcher) stop() {
	p.cancel()
	<-p.done
}

func (p *prefetcher) take() (*Frame, error) {
	r := <-p.slots[p.next]
	p.next++
	p.release()
	return r.f, r.err
}

// integrateScene fuses one placed frame into the handheld rig's scene
// volume, which tracking raycasts: the part's noise-model weights, and
// the scene's own bands behind the surface (FuseOptions.sceneBands).
func (f *fuser) integrateScene(ctx context.Context, scene *Volume, fr *Frame, camToWorld mesh.Pose) error {
	f.sceneWeights, f.sceneBehind = f.opt.sceneBands(fr.Depth, fr.Intr, f.sceneWeights, f.sceneBehind)
	_, err := scene.Integrate(ctx, &DepthImage{Intr: fr.Intr, Depth: fr.Depth, Weight: f.sceneWeights, Behind: f.sceneBehind}, camToWorld)
	return err
}

// integrate fuses one placed frame into the part volume.
func (f *fuser) integrate(ctx context.Context, fr *Frame, camToWorld mesh.Pose, alloc []bool) error {
	im := fr.DepthImage()
	wo := f.opt.Weights
	if wo.BehindMin == 0 {
		wo.BehindMin = 1.75 * f.opt.TSDF.VoxelSize
	}
	// Every voxel of the part lies within AllocReach of the region.
	wo.Region = f.roi.ImageRect(fr.Intr, camToWorld, f.part.AllocReach(), f.opt.TSDF.MinDepth)
	f.weights, f.behind = MeasurementBands(fr.Depth, fr.Intr, wo, f.weights, f.behind, true)
	im.Weight, im.Behind = f.weights, f.behind
	im.Alloc = alloc
	if _, err := f.part.Integrate(ctx, im, camToWorld); err != nil {
		return fmt.Errorf("reconstruct: %s: frame %d: %w", f.sw.Dir, fr.Index, err)
	}
	f.rep.CamToWorld[fr.Index] = camToWorld
	f.rep.FramesUsed++
	return nil
}

// turntable places and fuses the frames of a turntable sweep.
func (f *fuser) turntable(ctx context.Context, worldFromFirst mesh.Pose) error {
	m := f.sw.Manifest
	sign := 1.0
	if m.Turntable != nil && m.Turntable.AngleSign != 0 {
		sign = float64(m.Turntable.AngleSign)
	}
	ref := m.Frames[0].Angle
	if ref == nil {
		return fmt.Errorf("reconstruct: %s: frame 0: turntable sweep without a plate angle", f.sw.Dir)
	}
	rel := func(i int) (float64, bool) {
		a := m.Frames[i].Angle
		if a == nil {
			return 0, false
		}
		return sign * (*a - *ref), true
	}
	up := f.sup.Plane.Normal
	var point r3.Vec
	calibrated := m.Turntable != nil && m.Turntable.Axis != nil
	if calibrated {
		point, up = m.Turntable.Axis.Point, m.Turntable.Axis.Direction
		f.rep.AxisSource = "calibrated"
	} else {
		fit, err := f.estimateAxis(up)
		if err != nil {
			return err
		}
		point = fit.Point
		f.rep.AxisSource = "estimated"
		f.rep.AxisRMS = fit.RMS
	}
	// The region of interest turns with the part about the axis: a
	// cylinder about the axis that holds the part at every angle.
	setROI := func(point r3.Vec) {
		foot := r3.Sub(point, r3.Scale(f.sup.Plane.Distance(point), f.sup.Plane.Normal))
		off := r3.Sub(f.sup.Centre, foot)
		off = r3.Sub(off, r3.Scale(r3.Dot(off, f.sup.Plane.Normal), f.sup.Plane.Normal))
		f.setROI(f.sup.Plane, foot, r3.Norm(off)+f.sup.Radius)
	}
	setROI(point)
	f.rep.Axis = &Axis{Point: point, Direction: up}
	return f.turntablePass(ctx, point, up, rel, f.opt.RefineTurntable, "fuse")
}

// turntablePass places every usable frame by its plate angle about the
// axis (point, up), optionally refines it against the model so far, and
// fuses it into f.part.
func (f *fuser) turntablePass(ctx context.Context, point, up r3.Vec, rel func(int) (float64, bool), refine bool, stage string) error {
	usable := f.sw.Usable()
	var tr *Tracker
	if refine {
		topt := f.opt.Track
		topt.Damping = f.opt.RefineDamping
		topt.MaxShift, topt.MaxTurn = f.opt.MaxRefineShift, f.opt.MaxRefineTurn
		var err error
		if tr, err = NewTracker(f.part, f.first.Intr, topt); err != nil {
			return err
		}
	}
	pf := f.prefetch(ctx, usable)
	defer pf.stop()
	var refineSum float64
	for k, idx := range usable {
		fr, err := f.next(ctx, pf, idx)
		if err != nil {
			return err
		}
		if fr == nil {
			continue
		}
		a, ok := rel(idx)
		if !ok {
			if err := f.skip(idx, "no plate angle recorded"); err != nil {
				return err
			}
			continue
		}

		pose := TurntablePose(point, up, a)
		f.alloc = f.mask(fr, pose, f.alloc)
		if tr != nil && f.rep.FramesUsed > 0 {
			res, err := tr.Track(ctx, fr.Depth, f.alloc, pose)
			if err != nil {
				return err
			}
			if !res.Lost {
				refineSum += r3.Norm(r3.Sub(res.CamToWorld.T, pose.T))
				f.rep.Refined++
				pose = res.CamToWorld
				f.alloc = f.mask(fr, pose, f.alloc)
			}
		}
		if err := f.integrate(ctx, fr, pose, f.alloc); err != nil {
			return err
		}
		if tr != nil {
			tr.UpdateModel(ctx, pose)
		}
		f.progress(stage, k+1, len(usable))
	}
	if f.rep.Refined > 0 {
		f.rep.RefineMean = refineSum / float64(f.rep.Refined)
	}
	return ctx.Err()
}

// estimateAxis finds where an uncalibrated turntable's axis passes,
// from the first frame and a few others at useful angles.
func (f *fuser) estimateAxis(up r3.Vec) (AxisFit, error) {
	m := f.sw.Manifest
	usable := f.sw.Usable()
	ref := m.Frames[0].Angle
	sign := 1.0
	if m.Turntable != nil && m.Turntable.AngleSign != 0 {
		sign = float64(m.Turntable.AngleSign)
	}
	var angles []float64
	var idxs []int
	for _, i := range usable[1:] {
		if a := m.Frames[i].Angle; a != nil && ref != nil {
			angles = append(angles, sign*(*a-*ref))
			idxs = append(idxs, i)
		}
	}
	refCloud := f.plateCloud(f.first)
	var pairs []AxisPair
	for _, k := range PickAxisViews(angles, max(1, f.opt.AxisViews)) {
		fr, err := f.sw.Frame(idxs[k])
		if err != nil {
			continue
		}
		if c := f.plateCloud(fr); len(c.Points) > 0 {
			pairs = append(pairs, AxisPair{From: refCloud, To: c, Angle: angles[k]}, AxisPair{From: c, To: refCloud, Angle: -angles[k]})
		}
	}
	if len(pairs) == 0 {
		return AxisFit{}, fmt.Errorf("reconstruct: %s: cannot estimate the turntable axis: no frame between 20° and 120° from the first shows the part (calibrate the axis in the manifest)", f.sw.Dir)
	}
	fit, err := EstimateAxisPoint(up, f.sup.Centre, pairs, f.opt.Axis)
	if err != nil {
		return fit, fmt.Errorf("reconstruct: %s: turntable axis: %w", f.sw.Dir, err)
	}
	f.rep.AxisMethod = "view pairs"
	if f.opt.PlateViews < 2 {
		return fit, nil
	}
	var views []PlateView
	for k := 0; k < f.opt.PlateViews; k++ {
		idx := usable[k*len(usable)/f.opt.PlateViews]
		a := m.Frames[idx].Angle
		if a == nil || ref == nil {
			continue
		}
		fr := f.first
		if idx != f.first.Index {
			if fr, err = f.sw.Frame(idx); err != nil {
				continue
			}
		}
		views = append(views, PlateView{Depth: fr.Depth, Color: fr.Color, Intr: fr.Intr, Angle: sign * (*a - *ref)})
	}
	radius := f.sup.SupportRadius
	if radius == 0 {
		radius = f.sup.Radius + f.opt.ROIMargin
	}
	pf, err := EstimateAxisFromPlate(f.sup.Plane, fit.Point, radius, views, f.opt.PlateAxis)
	f.rep.PlateCorrelation = pf.Correlation
	switch {
	case err == nil:
		// The plate fit lies on the plate's top plane; the view pairs'
		// point lies on the plane through their start normal to up:
		// the same line either way.
		f.rep.AxisMethod = "plate texture"
		d := r3.Sub(pf.Point, fit.Point)
		f.rep.AxisShift = r3.Norm(r3.Sub(d, r3.Scale(r3.Dot(d, up), up)))
		fit.Point = pf.Point
	case errors.Is(err, ErrWeakTexture), errors.Is(err, mesh.ErrDegenerate):
		// The view pairs' estimate stands.
	default:
		return fit, fmt.Errorf("reconstruct: %s: turntable axis: %w", f.sw.Dir, err)
	}
	return fit, nil
}

// plateCloud returns what stands on the turntable plate in one frame
// (the camera and the plate's plane never move): the full-resolution
// points between 4σ of the depth noise and the part's height plus the margin above
// the plane of the first frame's support, whose foot lies on the plate
// (within its radius around its centre, which leaves the background
// clutter out), with normals from the depth image's neighbourhood (a
// span of two pixels, which halves their noise against adjacent
// differences). Pixels within two pixels of a foreground edge are left
// out: the sensor's lateral noise smears depth past silhouettes (Nguyen
// et al. 2012), differently in every view.
func (f *fuser) plateCloud(fr *Frame) *mesh.Cloud {
	n := len(fr.Depth)
	vert, norm := make([]r3.Vec, n), make([]r3.Vec, n)
	vertexNormalMaps(fr.Depth, fr.Intr, vert, norm, 2, 1, f.opt.TSDF.Workers)
	w, h := fr.Intr.Width, fr.Intr.Height
	near := nearEdges(fr.Depth, w, h, 0.01, 0)
	pl := f.sup.Plane
	centre, radius := f.sup.SupportCentre, f.sup.SupportRadius
	if radius == 0 {
		centre, radius = f.sup.Centre, f.sup.Radius+f.opt.ROIMargin
	}
	top := f.sup.Height + f.opt.ROIMargin
	// Over the whole plate, 2σ noise (MinHeight) would let through
	// thousands of plate pixels; 4σ of the axial noise at the plate's
	// distance lets through a handful.
	minHeight := math.Max(f.opt.Support.MinHeight, 3*axialSigma(r3.Norm(centre), 0))
	c := &mesh.Cloud{}
	for i, z := range fr.Depth {
		if z <= 0 || near[i] || norm[i] == (r3.Vec{}) {
			continue
		}
		p := vert[i]
		ht := pl.Distance(p)
		if ht < minHeight || ht > top {
			continue
		}
		v := r3.Sub(p, centre)
		if r3.Norm(r3.Sub(v, r3.Scale(r3.Dot(v, pl.Normal), pl.Normal))) > radius {
			continue
		}
		c.Points = append(c.Points, p)
		c.Normals = append(c.Normals, norm[i])
	}
	return c
}

// next takes frame idx from the prefetcher. A frame that cannot be
// read, or that has almost no depth in range (lacksDepth), is skipped
// with its reason and comes back nil; in strict mode that is an error.
func (f *fuser) next(ctx context.Context, pf *prefetcher, idx int) (*Frame, error) {
	fr, err := pf.take()
	return f.usableFrame(ctx, idx, fr, err)
}

// trackAhead prepares the handheld loop's next frame for tracking
// while the loop tracks the current one, on a goroutine of its own
// (prepareAhead): its luminance, and its pyramid (depth filter, levels,
// samples) on a spare tracker whose pyramid the loop's tracker then
// adopts. The loop spends the time on the frame it tracks, and the
// pyramids fill the moments a core would sit idle. One spare tracker is
// enough: in six alternating pairs of Fuse on the handheld bench sweep
// it took 8.76 s on average and two (two frames ahead) 8.90, within
// this machine's drift, with a peak heap 60–90 MB larger.
type trackAhead struct {
	ctx  context.Context
	out  chan aheadFrame
	pool chan *Tracker // trackers free to prepare a frame
	done chan struct{}
	quit context.CancelFunc
}

// aheadFrame is one frame from prepareAhead: as the prefetcher gave it
// (or its error), its luminance (colour term) and the tracker holding
// its pyramid, nil where there is none (an error, no depth).
type aheadFrame struct {
	fr   *Frame
	err  error
	lum  []float32
	prep *Tracker
}

// prepareAhead starts preparing the n frames pf gives, in order.
func (f *fuser) prepareAhead(ctx context.Context, pf *prefetcher, n int, colour bool) (*trackAhead, error) {
	topt := f.opt.Track
	topt.Workers = 1
	ctx, quit := context.WithCancel(ctx)
	a := &trackAhead{ctx: ctx, out: make(chan aheadFrame, 1), pool: make(chan *Tracker, 1), done: make(chan struct{}), quit: quit}
	for range cap(a.pool) {
		t, err := NewTracker(nil, f.first.Intr, topt)
		if err != nil {
			quit()
			return nil, err
		}
		a.pool <- t
	}
	go func() {
		defer close(a.done)
		for range n {
			fr, err := pf.take()
			af := aheadFrame{fr: fr, err: err}
			if err == nil && f.lacksDepth(fr) == "" {
				if colour {
					af.lum = Luminance(fr.Color, nil)
				}
				select {
				case af.prep = <-a.pool:
				case <-ctx.Done():
					return
				}
				af.prep.prepareColour(fr.Depth, af.lum, nil, colour)
			}
			select {
			case a.out <- af:
			case <-ctx.Done():
				return
			}
		}
	}()
	return a, nil
}

// take returns the next frame and what was prepared of it; once the
// context is done, its error.
func (a *trackAhead) take() (*Frame, []float32, *Tracker, error) {
	select {
	case af := <-a.out:
		return af.fr, af.lum, af.prep, af.err
	case <-a.done:
		// The goroutine stopped: the context is done (or every frame was
		// taken already, which the loop never asks beyond).
		select {
		case af := <-a.out:
			return af.fr, af.lum, af.prep, af.err
		default:
		}
		if err := a.ctx.Err(); err != nil {
			return nil, nil, nil, err
		}
		return nil, nil, nil, errors.New("reconstruct: no frame left to track")
	}
}

// recycle gives back a tracker a frame was prepared on (or, after
// Tracker.adopt, the one holding the loop tracker's former pyramid);
// nil is ignored, and so is a nil trackAhead.
func (a *trackAhead) recycle(t *Tracker) {
	if a != nil && t != nil {
		a.pool <- t
	}
}

// stop ends the goroutine and waits for it.
func (a *trackAhead) stop() {
	a.quit()
	<-a.done
}

// usableFrame is next for a frame already taken, or the error taking
// it gave.
func (f *fuser) usableFrame(ctx context.Context, idx int, fr *Frame, err error) (*Frame, error) {
	if err != nil {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		return nil, f.skip(idx, err.Error())
	}
	if reason := f.lacksDepth(fr); reason != "" {
		return nil, f.skip(idx, reason)
	}
	return fr, nil
}

// lacksDepth says why a frame cannot be fused when fewer than 1% of its
// pixels have a depth inside the volume's range (a covered lens, a
// saturated projector, a frame of the wrong scene), or "".
func (f *fuser) lacksDepth(fr *Frame) string {
	lo, hi := float32(f.opt.TSDF.MinDepth), float32(f.opt.TSDF.MaxDepth)
	n := 0
	for _, z := range fr.Depth {
		if z >= lo && z <= hi {
			n++
		}
	}
	if n*100 >= len(fr.Depth) {
		return ""
	}
	return fmt.Sprintf("only %d of %d pixels have a depth between %.2f and %.2f m", n, len(fr.Depth), lo, hi)
}

// nearEdges marks the pixels within k pixels (Chebyshev distance) of a
// foreground edge: a valid pixel with a 4-neighbour that is missing or
// farther by more than jump metres.
func nearEdges(depth []float32, w, h int, jump float32, k int) []bool {
	edge := make([]bool, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			z := depth[y*w+x]
			if z <= 0 {
				continue
			}
			for _, d := range [4][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				nx, ny := x+d[0], y+d[1]
				if nx < 0 || ny < 0 || nx >= w || ny >= h {
					continue
				}
				if n := depth[ny*w+nx]; n <= 0 || n-z > jump {
					edge[y*w+x] = true
					break
				}
			}
		}
	}
	out := make([]bool, w*h)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			if !edge[y*w+x] {
				continue
			}
			for yy := max(0, y-k); yy <= min(h-1, y+k); yy++ {
				for xx := max(0, x-k); xx <= min(w-1, x+k); xx++ {
					out[yy*w+xx] = true
				}
			}
		}
	}
	return out
}

// handheld places and fuses the frames of a handheld sweep.
func (f *fuser) handheld(ctx context.Context, worldFromFirst mesh.Pose) error {
	usable := f.sw.Usable()
	// Poses given for every usable frame are used as they are.
	given := true
	for _, i := range usable {
		if f.sw.Manifest.Frames[i].CamToWorld == nil {
			given = false
			break
		}
	}
	plane := f.sup.Plane.Transform(worldFromFirst)
	f.setROI(plane, worldFromFirst.Apply(f.sup.Centre), f.sup.Radius)
	var scene *Volume
	var tr *Tracker
	if !given {
		var err error
		if scene, err = NewVolume(f.opt.sceneTSDF()); err != nil {
			return err
		}
		if tr, err = NewTracker(scene, f.first.Intr, f.opt.Track); err != nil {
			return err
		}
	}
	// With a pose graph the part is fused once the poses are final.
	graph := tr != nil && f.opt.Loop.NodeTurn > 0
	var nodes []graphNode
	var gb *graphBuilder
	if graph {
		// Registrations start as nodes come in, on a core tracking
		// leaves idle part of the time.
		gb = newGraphBuilder(ctx, f.first.Intr, f.opt.Track, f.opt.Loop, f.opt.Track.Workers, true)
		defer gb.stop()
	}
	var placedIdx []int
	var placedPose []mesh.Pose
	var kept []*Frame // the part's region of each placed frame, or nil
	var keptBytes int64
	pf := f.prefetch(ctx, usable)
	defer pf.stop()
	pose, prev := worldFromFirst, worldFromFirst
	placed := 0
	colour := tr != nil && f.opt.Track.ColorSigma > 0
	var ahead *trackAhead
	if tr != nil {
		var err error
		if ahead, err = f.prepareAhead(ctx, pf, len(usable), colour); err != nil {
			return err
		}
		defer ahead.stop()
	}
	for k, idx := range usable {
		var fr *Frame
		var lum []float32
		var prep *Tracker // the frame's pyramid, prepared ahead
		var err error
		if ahead != nil {
			fr, lum, prep, err = ahead.take()
		} else {
			fr, err = pf.take()
		}
		if fr, err = f.usableFrame(ctx, idx, fr, err); err != nil || fr == nil {
			ahead.recycle(prep)
			if err != nil {
				return err
			}
			continue
		}
		newKey := placed == 0
		trackedColour := false // tr's pyramid of the frame has luminance
		switch {
		case given:
			pose = fr.CamToWorld
		case placed > 0:
			pred := pose
			if placed > 1 {
				pred = pose.Mul(prev.Inv().Mul(pose)) // constant velocity
			}
			// The frame's pyramid as TrackColor would build it: prepared
			// ahead, or here when the colour term's use differs.
			c := lum != nil && tr.key != nil && tr.opt.ColorSigma > 0
			if prep != nil && c == colour {
				tr.adopt(prep)
			} else {
				c = tr.prepare(fr.Depth, lum, nil)
			}
			ahead.recycle(prep)
			prep = nil
			res, err := tr.trackPrepared(ctx, c, pred)
			if err != nil {
				return err
			}
			if res.Lost {
				// Try again from the last placed pose before giving up.
				if placed > 1 {
					res, err = tr.trackPrepared(ctx, c, pose)
					if err != nil {
						return err
					}
				}
				if res.Lost {
					if err := f.skip(idx, "tracking lost: "+res.Reason); err != nil {
						return err
					}
					continue
				}
			}
			prev, pose = pose, res.CamToWorld
			newKey = res.KeyOverlap < f.opt.Track.KeyframeOverlap
			trackedColour = c
		}
		ahead.recycle(prep)
		isNode := graph && f.opt.Loop.isNode(nodes, pose)
		if graph {
			if isNode {
				n := graphNode{placed: placed, pose: pose, depth: slices.Clone(fr.Depth)}
				if placed > 0 && f.opt.Track.DepthFilter > 0 {
					// tracking has just filtered this frame's depth, and
					// prepared it as the registrations will
					n.tdepth = tr.filteredDepth()
					n.prep = tr.snapshotPrepared(len(nodes), trackedColour, gb.spareFrame())
				}
				if colour {
					n.lum = lum // the frame's own, from prepareAhead
				}
				nodes = append(nodes, n)
			}
			placedIdx, placedPose = append(placedIdx, idx), append(placedPose, pose)
			kept = append(kept, f.keepCrop(fr, pose, &keptBytes))
		} else {
			f.alloc = f.mask(fr, pose, f.alloc)
			if err := f.integrate(ctx, fr, pose, f.alloc); err != nil {
				return err
			}
		}
		if scene != nil {
			if err := f.integrateScene(ctx, scene, fr, pose); err != nil {
				return fmt.Errorf("reconstruct: %s: frame %d: %w", f.sw.Dir, idx, err)
			}
			tr.UpdateModel(ctx, pose)
			if isNode {
				n := &nodes[len(nodes)-1]
				n.model = compactModel(tr.model, pose)
				n.tdepth = gb.add(*n)
			}
			if colour && newKey {
				tr.SetKeyframe(lum, fr.Depth, pose)
			}
		}
		placed++
		f.progress("fuse", k+1, len(usable))
	}
	if err := ctx.Err(); err != nil || !graph {
		return err
	}
	return f.closeLoop(ctx, gb, nodes, placedIdx, placedPose, kept)
}

// closeLoop corrects the tracked poses with the pose graph over nodes,
// whose registrations gb has been making, and fuses the placed frames
// into the part volume at the corrected poses: from kept, their part's
// region kept in memory, or decoded again where kept holds nil.
func (f *fuser) closeLoop(ctx context.Context, gb *graphBuilder, nodes []graphNode, placedIdx []int, placedPose []mesh.Pose, kept []*Frame) error {
	poses := placedPose
	t0 := time.Now()
	g := &poseGraph{nodes: nodes}
	if err := g.finish(gb); err != nil {
		return fmt.Errorf("reconstruct: %s: %w", f.sw.Dir, err)
	}
	if len(nodes) >= 2 {
		newNode, dropped, err := g.optimise(f.opt.Loop)
		if err != nil {
			return fmt.Errorf("reconstruct: %s: %w", f.sw.Dir, err)
		}
		poses = correctPoses(placedPose, nodes, newNode, f.opt.Loop.DriftSpan)
		f.graphTime = time.Since(t0)
		f.rep.GraphNodes, f.rep.GraphEdges, f.rep.GraphDropped = len(nodes), len(g.edges), dropped
		for k := range poses {
			f.rep.GraphCorrection = math.Max(f.rep.GraphCorrection, r3.Norm(r3.Sub(poses[k].T, placedPose[k].T)))
		}
	}
	var again []int
	for k, idx := range placedIdx {
		if kept[k] != nil && f.roiMoved(placedPose[k], poses[k]) > cropMargin {
			kept[k] = nil // moved beyond what its region allows for
		}
		if kept[k] == nil {
			again = append(again, idx)
		}
	}
	pf := f.prefetch(ctx, again)
	defer pf.stop()
	for k, idx := range placedIdx {
		fr := kept[k]
		if fr == nil {
			var err error
			if fr, err = pf.take(); err != nil {
				if ctx.Err() != nil {
					return ctx.Err()
				}
				return fmt.Errorf("reconstruct: %s: frame %d read again: %w", f.sw.Dir, idx, err)
			}
		}
		kept[k] = nil // fused: its memory can go
		f.alloc = f.mask(fr, poses[k], f.alloc)
		if err := f.integrate(ctx, fr, poses[k], f.alloc); err != nil {
			return err
		}
		f.progress("fuse again", k+1, len(placedIdx))
	}
	return ctx.Err()
}

// cropMargin is how far (metres) the region of interest may move, seen
// from a frame, between the pose its region was kept at and the pose it
// is fused at (keepCrop).
const cropMargin = 0.01

// roiMoved bounds how far any point of the region of interest moves
// relative to a camera whose pose changes from before to after: the
// move of its centre plus the turn times its reach from there (radius,
// height and the centre's own height above the support, summed).
func (f *fuser) roiMoved(before, after mesh.Pose) float64 {
	d := after.Mul(before.Inv())
	reach := f.roi.Radius + f.roi.Top + math.Abs(f.roi.Plane.Distance(f.roi.Centre))
	return r3.Norm(r3.Sub(d.Apply(f.roi.Centre), f.roi.Centre)) + mesh.RotationAngle(d, mesh.Identity())*reach
}

// keepCrop returns a copy of the part's region of fr placed at
// camToWorld, with intrinsics moved to match (a camera whose image is
// that region), or nil when it would take kept past KeepBytes. The
// region is the one the part volume's integration reads
// (ROI.ImageRect), widened by cropMargin for the pose graph's
// corrections (a frame corrected more is decoded again) and by 4 pixels for the weights' stencil (WeightOptions.NormalSpan 3),
// and starts on a multiple of 4 pixels so that every pixel sampled at
// a stride (TSDFOptions.AllocStride) is sampled in the region too.
func (f *fuser) keepCrop(fr *Frame, camToWorld mesh.Pose, kept *int64) *Frame {
	r := f.roi.ImageRect(fr.Intr, camToWorld, f.part.AllocReach()+cropMargin, f.opt.TSDF.MinDepth)
	r = image.Rect((r.Min.X-4)&^3, (r.Min.Y-4)&^3, r.Max.X+4, r.Max.Y+4).Intersect(image.Rect(0, 0, fr.Intr.Width, fr.Intr.Height))
	w, h := r.Dx(), r.Dy()
	if w <= 0 || h <= 0 {
		// The region is out of view: nothing of the part volume projects
		// into this frame, and a pixel stands in for the frame.
		r, w, h = image.Rect(0, 0, 1, 1), 1, 1
	}
	size := int64(w*h) * 8 // float32 depth and 4 bytes of colour
	if *kept+size > f.opt.KeepBytes {
		return nil
	}
	*kept += size
	out := &Frame{Index: fr.Index, Intr: fr.Intr, Depth: make([]float32, w*h)}
	out.Intr.Width, out.Intr.Height = w, h
	out.Intr.Cx -= float64(r.Min.X)
	out.Intr.Cy -= float64(r.Min.Y)
	for y := 0; y < h; y++ {
		copy(out.Depth[y*w:(y+1)*w], fr.Depth[(r.Min.Y+y)*fr.Intr.Width+r.Min.X:])
	}
	if fr.Color != nil {
		out.Color = image.NewNRGBA(image.Rect(0, 0, w, h))
		for y := 0; y < h; y++ {
			copy(out.Color.Pix[y*out.Color.Stride:y*out.Color.Stride+4*w], fr.Color.Pix[(r.Min.Y+y)*fr.Color.Stride+4*r.Min.X:])
		}
	}
	return out
}

// checkDepthScale refuses depth whose median is far outside the range
// any RGB-D part scan uses (0.05–20 m): the sign of a wrong depth unit.
func checkDepthScale(fr *Frame, unit float64) error {
	var vals []float32
	for i := 0; i < len(fr.Depth); i += 7 {
		if z := fr.Depth[i]; z > 0 {
			vals = append(vals, z)
		}
	}
	if len(vals) == 0 {
		return fmt.Errorf("no valid depth in the frame: %w", ErrNoPart)
	}
	slices.Sort(vals)
	med := float64(vals[len(vals)/2])
	if med >= 0.05 && med <= 20 {
		return nil
	}
	// Suggest the power of ten that brings the median to about 0.5 m.
	factor := math.Pow(10, math.Round(math.Log10(0.5/med)))
	return fmt.Errorf("%w: median depth %.4g m with depth_unit_m = %g; a part scan sits at 0.2–2 m, so the unit is probably %g (%gx)", ErrDepthScale, med, unit, unit*factor, factor)
}

// cleanUp removes the support surface and floaters and keeps the part.
func (f *fuser) cleanUp(m *mesh.Mesh) (*mesh.Mesh, error) {
	crop := f.opt.CropHeight
	if crop == 0 {
		crop = 0.75 * f.opt.TSDF.VoxelSize
	}
	// Cut the surface along the plane crop above the support, so the
	// part's rim where it stood lies exactly there (CropHeight in the
	// report tells a later stage where the model ends).
	plane := f.roi.Plane
	f.rep.CropHeight = crop
	f.rep.CropRemoved = m.ClipPlane(plane.Normal, plane.Offset-crop)
	if len(m.Faces) == 0 {
		return nil, fmt.Errorf("%w: the volume holds no surface above the support", ErrNoPart)
	}
	if f.opt.KeepLargest {
		comps, _ := m.KeepLargestComponent()
		f.rep.Components = comps
	} else if f.opt.MinComponentFraction > 0 {
		comps, _ := m.RemoveSmallComponents(int(f.opt.MinComponentFraction * float64(len(m.Faces))))
		f.rep.Components = comps
	}
	m.RemoveUnreferencedVertices()
	if f.opt.Smooth > 0 {
		m.SmoothTaubin(0.5, -0.53, f.opt.Smooth)
	}
	return m, nil
}
