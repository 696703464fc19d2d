package reconstruct

import (
	"context"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// pyramidLevels is the depth of the coarse-to-fine pyramid
// (KinectFusion: Newcombe et al. 2011).
const pyramidLevels = 3

// TrackOptions tunes frame-to-model tracking.
type TrackOptions struct {
	// Iterations per pyramid level, finest first. KinectFusion uses 10, 5
	// and 4 (from memory); the two finer levels here pair every second
	// pixel in both directions (levelStep).
	// DEFAULT: {6, 5, 4}
	Iterations [pyramidLevels]int
	// MaxDistance rejects pairs farther apart (metres), finest first.
	// DEFAULT: {0.01, 0.02, 0.04}
	MaxDistance [pyramidLevels]float64
	// MaxNormalAngle rejects pairs whose normals differ more (radians).
	// DEFAULT: 30° (0.5236)
	MaxNormalAngle float64
	// ModelScale is the downsampling of the raycast model map relative to
	// the input image (4: a 640×480 sweep raycasts at 160×120, a ray per
	// 4 mm voxel at half a metre). With the pose graph (LoopOptions), 4
	// against 2 cut the handheld loop's CPU time by a fifth (199–208 →
	// 154–160 cpu-ms a frame) and left the five 120-frame demo sweeps'
	// worst camera error at 1.15–1.53 mm (1.08–1.54 at 2), their mean
	// surface and F@2mm alike.
	// DEFAULT: 4
	ModelScale int
	// MinInlierRatio: below this share of valid pixels paired at the
	// finest level, tracking is lost.
	// DEFAULT: 0.3
	MinInlierRatio float64
	// MaxRMS: above this point-to-plane residual (metres) at the finest
	// level, tracking is lost.
	// DEFAULT: 0.006
	MaxRMS float64
	// MaxShift and MaxTurn: a frame that moves farther than these from
	// the prediction is lost (a jump no hand makes in one frame).
	// DEFAULT: 0.08 m, 20° (0.349 rad)
	MaxShift, MaxTurn float64
	// Damping pulls each step toward the predicted pose, relative to the
	// normal matrix's diagonal (PlaneSystem.StepToward): the directions
	// the scene constrains give up about this fraction of their motion,
	// the ones it leaves loose (a camera sliding over a large table) stay
	// near the motion model's prediction instead of drifting with noise.
	// DEFAULT: 0.001
	Damping float64
	// StopShift and StopTurn end a pyramid level's iterations once a step
	// moves the camera less than both (metres, radians). A twentieth of
	// the 2 mm / 0.5° a handheld sweep's poses need; 1 µm and 1e−6 rad
	// made the tracker 25 % slower on the demo sweeps for the same poses
	// (worst camera error within 0.2 mm of each other).
	// DEFAULT: 1e-4, 1e-4
	StopShift, StopTurn float64
	// ColorSigma, when > 0, adds a colour term to tracking
	// (TrackColor): the new frame's luminance against a keyframe's, with
	// a residual of ColorSigma (8-bit levels) weighing like one of the
	// axial depth noise at 0.5 m. Sideways motions over a flat, textured
	// table move little depth but much colour. 0 turns it off.
	// DEFAULT: 0 in DefaultTrackOptions; DefaultFuseOptions sets 3 for
	// the handheld rig
	ColorSigma float64
	// ColorSubsample: at full resolution the colour term takes every
	// ColorSubsample-th tracking sample (each weighing that much more);
	// depth pairs take them all. 2 on the handheld rig: the five
	// 120-frame demo sweeps' worst camera error 1.07–1.49 mm against
	// 1.09–1.56 with every sample, and the handheld loop a tenth faster.
	// DEFAULT: 1 in DefaultTrackOptions; DefaultFuseOptions sets 2 for
	// the handheld rig
	ColorSubsample int
	// DepthFilter, when > 0, smooths the frame's depth before tracking
	// builds its pyramid, as KinectFusion does (Newcombe et al. 2011): a
	// bilateral filter (Tomasi & Manduchi 1998, ICCV, DOI
	// 10.1109/ICCV.1998.710815), separable (bilateralDepth), 5 pixels
	// wide, spatial σ 1.5 pixels,
	// range σ DepthFilter·σ_z of the centre pixel (Nguyen et al. 2012),
	// cut off beyond 3 range σ, so that depth edges stay sharp. Tracking
	// alone against scene volumes and keyframes fused at the true poses,
	// the seed-1 nut's frames ended 0.52 mm off on average and 2.50 at
	// worst without it and 0.48 / 1.91 with 2; the seed-1 labelbox
	// 0.41 / 1.70 and 0.36 / 1.29; the seed-3 nut 0.47 / 1.64 and
	// 0.43 / 1.19. With the pose graph, on the 14 handheld demo sweeps
	// (the five parts at seed 11, seeds 1–3), the worst camera error
	// averaged 1.62 mm, reached 2.57 and stayed within 2 mm on 12 sweeps
	// without it; 1.38 / 1.77 / 14 with 2, for 13 % more time (a 5×5
	// window instead of two passes: 1.38 / 2.44 / 13). Only tracking sees
	// the filtered depth; the TSDF fuses the measured one.
	// DEFAULT: 0 (off) in DefaultTrackOptions; DefaultFuseOptions sets 2
	// for the handheld rig
	DepthFilter float64
	// KeyframeOverlap: when fewer of a placed frame's pixels than this
	// share pair with the keyframe, that frame becomes the keyframe.
	// Each new keyframe carries its pose's error into the frames after
	// it; on the five 120-frame handheld demo sweeps 0.4 gave the worst
	// camera errors 2.53/1.24/4.55/2.03/1.00 mm (nut, bushing, bracket,
	// labelbox, valve) against 2.58/3.24/5.36/2.03/1.11 at 0.6 and
	// 2.12/2.45/5.77/2.03/1.94 at 0.3.
	// DEFAULT: 0.4
	KeyframeOverlap float64
	// Workers bounds the goroutines; 0 means all cores.
	// DEFAULT: 0
	Workers int
}

// DefaultTrackOptions returns the documented defaults.
func DefaultTrackOptions() TrackOptions {
	return TrackOptions{
		Iterations:      [pyramidLevels]int{6, 5, 4},
		MaxDistance:     [pyramidLevels]float64{0.01, 0.02, 0.04},
		MaxNormalAngle:  30 * math.Pi / 180,
		ModelScale:      4,
		MinInlierRatio:  0.3,
		MaxRMS:          0.006,
		MaxShift:        0.08,
		MaxTurn:         20 * math.Pi / 180,
		Damping:         1e-3,
		KeyframeOverlap: 0.4,
		ColorSubsample:  1,
		StopShift:       1e-4,
		StopTurn:        1e-4,
	}
}

// TrackResult is the outcome of tracking one frame.
type TrackResult struct {
	CamToWorld  mesh.Pose
	Lost        bool   // the frame could not be placed; CamToWorld is the prediction
	Reason      string // why it was lost
	RMS         float64
	InlierRatio float64
	// KeyOverlap is the share of the frame's pixels with depth that
	// paired with the keyframe's colour (TrackColor; 0 without one).
	KeyOverlap float64
	Pairs      int
	// system is the last full-resolution step's system, depth pairs and
	// colour rows (its normal matrix weighs a pose graph's edge)
	system mesh.PlaneSystem
}

// level is one pyramid level of the incoming frame: camera-frame vertex
// and normal maps (zero normal = invalid).
type level struct {
	intr  mesh.Intrinsics
	depth []float32
	vert  []r3.Vec
	norm  []r3.Vec
	valid int
	// bin is each pixel's normal-direction bin and binWeight the weight
	// of a pair in that bin (normal-space equalisation, below).
	bin       []uint8
	binWeight [normalBins]float64
	binCounts [][normalBins]int // equaliseNormals' counts per band
	// samples are the pixels tracking visits (every step-th in both
	// directions, with depth), row by row, and bands[k] the first of
	// band k's (trackBandRows sampled rows a band); bands has one entry
	// more than there are bands.
	samples []trackSample
	bands   []int
}

// trackSample is one pixel that tracking visits, gathered once a frame
// so that the iterations read one contiguous array: its camera-frame
// vertex, its normal (zero when it has none), the weight of its
// point-to-plane pair and its luminance (colour term; 0 without).
type trackSample struct {
	v, n r3.Vec
	w    float64
	lum  float32
}

// trackBandRows is how many sampled rows make one band of a tracking
// pass: the bands are the parallel work items, and their partial sums
// are merged in band order, so the result does not depend on the
// number of workers.
const trackBandRows = 8

// levelStep is the pixel step tracking uses at pyramid level l: every
// second pixel of the full image is plenty, and so of the half-size
// level, which at every pixel cost as much as the full one. Pairing
// every second pixel of the half-size level left the worst camera error
// of the five 120-frame handheld demo sweeps (seed 11) within 0.1 mm of
// every pixel's (bracket 4.53, bushing 1.28, nut 2.52, valve 0.89,
// labelbox 2.10 mm; rotation at most 0.27°).
func levelStep(l int) int {
	if l == 2 {
		return 1
	}
	return 2
}

// normalBins is the number of normal-direction bins: the six faces of a
// cube, each split 4×4.
const normalBins = 96

// normalBin returns the cube-map bin of unit vector n.
func normalBin(n r3.Vec) uint8 {
	ax, ay, az := math.Abs(n.X), math.Abs(n.Y), math.Abs(n.Z)
	var face int
	var u, v, m float64
	switch {
	case ax >= ay && ax >= az:
		face, u, v, m = 0, n.Y, n.Z, ax
		if n.X < 0 {
			face = 1
		}
	case ay >= az:
		face, u, v, m = 2, n.X, n.Z, ay
		if n.Y < 0 {
			face = 3
		}
	default:
		face, u, v, m = 4, n.X, n.Y, az
		if n.Z < 0 {
			face = 5
		}
	}
	iu := min(3, int((u/m+1)*2))
	iv := min(3, int((v/m+1)*2))
	return uint8(face*16 + iu*4 + iv)
}

// equaliseNormals weights pixels so that every normal direction present
// counts alike, as normal-space sampling does (Rusinkiewicz & Levoy
// 2001, "Efficient variants of the ICP algorithm", 3DIM, DOI
// 10.1109/IM.2001.924423): a table top that fills most of the view
// constrains only three degrees of freedom, and left at full weight it
// drowns the few pixels of the part and clutter that fix the other
// three, which then converge slowly and drift with the noise. A bin's
// weight is the mean count per occupied bin over its own count, capped at
// 10.
func (lv *level) equaliseNormals(step int, workers int) {
	w, h := lv.intr.Width, lv.intr.Height
	rows := (h + step - 1) / step
	nb := (rows + trackBandRows - 1) / trackBandRows
	if cap(lv.binCounts) < nb {
		lv.binCounts = make([][normalBins]int, nb)
	}
	counts := lv.binCounts[:nb]
	// Bands of rows count their bins on all cores; the counts add up
	// to the same totals in any order.
	par.For(nb, workers, func(k int) {
		c := &counts[k]
		*c = [normalBins]int{}
		for r := k * trackBandRows; r < min(rows, (k+1)*trackBandRows); r++ {
			y := r * step // vertexNormalMaps gives no other pixel a normal
			for x := 0; x < w; x += step {
				i := y*w + x
				n := lv.norm[i]
				if n == (r3.Vec{}) {
					continue
				}
				b := normalBin(n)
				lv.bin[i] = b
				c[b]++
			}
		}
	})
	var count [normalBins]int
	for k := range counts {
		for b, c := range counts[k] {
			count[b] += c
		}
	}
	occupied := 0
	for _, c := range count {
		if c > 0 {
			occupied++
		}
	}
	mean := float64(lv.valid) / max(1, float64(occupied))
	for b, c := range count {
		lv.binWeight[b] = 0
		if c > 0 {
			lv.binWeight[b] = min(10, mean/float64(c))
		}
	}
}

// Tracker places depth frames against a TSDF volume by point-to-plane
// ICP with projective data association (Newcombe et al. 2011, ISMAR,
// DOI 10.1109/ISMAR.2011.6092378): the volume is raycast from the last
// placed pose into a model map; every pixel of the new frame, moved by
// the current estimate, is projected into that map and paired with the
// model point and normal found there; each step solves the 6×6
// linearised system (Low 2004) and the pyramid runs coarse to fine.
type Tracker struct {
	vol       *Volume
	intr      mesh.Intrinsics
	opt       TrackOptions
	levels    [pyramidLevels]level
	model     *ModelMap
	modelPose mesh.Pose
	parts     []bandSums
	// placed tells that the pyramid holds the frame the last Track
	// placed, at placedPose (UpdateModel's hint).
	placed     bool
	placedPose mesh.Pose
	// colour term: the keyframe and the new frame's luminance pyramid
	key *keyframe
	lum [pyramidLevels][]float32
	// raw is the masked depth before TrackOptions.DepthFilter, filterTmp
	// the filter's scratch
	raw, filterTmp []float32
}

// bandSums is one band's share of a tracking pass.
type bandSums struct {
	icp   mesh.PlaneSystem
	cands int
	photo photoPart
}

// NewTracker returns a tracker over vol for frames of intrinsics intr.
func NewTracker(vol *Volume, intr mesh.Intrinsics, opt TrackOptions) (*Tracker, error) {
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("reconstruct: tracker: %w", err)
	}
	if opt.ModelScale < 1 {
		opt.ModelScale = 1
	}
	t := &Tracker{vol: vol, intr: intr, opt: opt}
	for l := 0; l < pyramidLevels; l++ {
		li := intr.Scaled(1 << l)
		n := li.Width * li.Height
		t.levels[l] = level{intr: li, depth: make([]float32, n), vert: make([]r3.Vec, n), norm: make([]r3.Vec, n), bin: make([]uint8, n)}
		t.lum[l] = make([]float32, n)
	}
	return t, nil
}

// UpdateModel raycasts the volume from camToWorld; the next Track pairs
// against it. Call it after integrating each placed frame.
//
// When camToWorld is where the last Track placed its frame, the rays
// start near the depth that frame measured (at the model map's
// resolution, a level of the tracker's pyramid) instead of marching
// through the free space in front of it (Volume.raycast).
func (t *Tracker) UpdateModel(ctx context.Context, camToWorld mesh.Pose) {
	var hint []float32
	if t.placed && camToWorld == t.placedPose {
		for l := range t.levels {
			if 1<<l == t.opt.ModelScale {
				hint = t.levels[l].depth
			}
		}
	}
	t.placed = false
	t.model = t.vol.raycast(ctx, t.intr.Scaled(t.opt.ModelScale), camToWorld, t.model, hint)
	t.modelPose = camToWorld
}

// Track places depth (metres, the tracker's intrinsics) starting from
// predicted, a CamToWorld guess (the last pose, or a constant-velocity
// extrapolation). A frame that cannot be placed comes back Lost with the
// reason, and is not to be integrated. A frame placed more than 5 mm or
// 0.5° from the prediction is aligned again from there, up to three
// times while each run moves it that far (the few
// iterations per level can stop short of a large move: the second frame
// of a handheld sweep has no motion model, and stopped 7.2 mm off on a
// demo sweep).
//
// mask is nil (use every pixel) or marks the pixels that belong to what
// the model holds (a turntable's part, which turns while the rest of the
// scene stands still); the inlier ratio is then over the masked pixels.
func (t *Tracker) Track(ctx context.Context, depth []float32, mask []bool, predicted mesh.Pose) (TrackResult, error) {
	return t.TrackColor(ctx, depth, nil, mask, predicted)
}

// TrackColor is Track with the frame's luminance (Luminance's layout):
// when ColorSigma > 0 and a keyframe is set (SetKeyframe), each step
// also aligns the frame's colour with the keyframe's. TrackResult's
// KeyOverlap then tells when to set a new keyframe.
func (t *Tracker) TrackColor(ctx context.Context, depth, lum []float32, mask []bool, predicted mesh.Pose) (TrackResult, error) {
	t.placed = false
	if t.model == nil {
		return TrackResult{}, fmt.Errorf("reconstruct: Track before UpdateModel")
	}
	if len(depth) != t.intr.Width*t.intr.Height {
		return TrackResult{}, fmt.Errorf("reconstruct: depth has %d pixels, tracker expects %d×%d", len(depth), t.intr.Width, t.intr.Height)
	}
	if mask != nil && len(mask) != len(depth) {
		return TrackResult{}, fmt.Errorf("reconstruct: mask has %d pixels for %d", len(mask), len(depth))
	}
	if lum != nil && len(lum) != len(depth) {
		return TrackResult{}, fmt.Errorf("reconstruct: luminance has %d pixels for %d", len(lum), len(depth))
	}
	return t.trackPrepared(ctx, t.prepare(depth, lum, mask), predicted)
}

// prepare makes a frame ready for align, as TrackColor takes it: it
// builds the depth pyramid and, when the colour term applies (it
// reports whether), the luminance pyramid, and gathers each level's
// samples, which are all that align reads of the frame.
func (t *Tracker) prepare(depth, lum []float32, mask []bool) bool {
	colour := lum != nil && t.key != nil && t.opt.ColorSigma > 0
	t.prepareColour(depth, lum, mask, colour)
	return colour
}

// prepareColour is prepare with the colour term's use given: lum is
// read only when colour is set.
func (t *Tracker) prepareColour(depth, lum []float32, mask []bool, colour bool) {
	t.buildPyramid(depth, mask)
	if colour {
		copy(t.lum[0], lum)
		for l := 1; l < pyramidLevels; l++ {
			src := &t.levels[l-1]
			downLuminance(t.lum[l-1], src.depth, src.intr.Width, src.intr.Height, t.lum[l], t.opt.Workers)
		}
	}
	for l := range t.levels {
		var ll []float32
		if colour {
			ll = t.lum[l]
		}
		t.levels[l].gather(levelStep(l), ll, t.opt.Workers)
	}
}

// adopt makes the frame another tracker of the same intrinsics and
// options prepared (prepareColour) the one t aligns next
// (trackPrepared), as if t had prepared it: the two trackers swap their
// pyramids, so that each keeps buffers no other holds, and other can
// prepare the next frame.
func (t *Tracker) adopt(other *Tracker) {
	t.levels, other.levels = other.levels, t.levels
	t.lum, other.lum = other.lum, t.lum
}

// trackPrepared is TrackColor for the frame prepare made ready, colour
// being what prepare reported.
func (t *Tracker) trackPrepared(ctx context.Context, colour bool, predicted mesh.Pose) (TrackResult, error) {
	t.placed = false
	res := TrackResult{CamToWorld: predicted}
	a, lost, err := t.align(ctx, predicted, colour)
	if err != nil || lost != "" {
		res.Lost, res.Reason = lost != "", lost
		return res, err
	}
	from := predicted
	for range maxRealign {
		moved := from.Inv().Mul(a.pose)
		if r3.Norm(moved.T) <= retrackShift && mesh.RotationAngle(moved, mesh.Identity()) <= retrackTurn {
			break
		}
		// Far from the prediction (a second frame, which has no motion
		// model, or a sudden move): the pyramid's few iterations may have
		// stopped short; run it again from where it got.
		a2, lost2, err := t.align(ctx, a.pose, colour)
		if err != nil {
			return res, err
		}
		if lost2 != "" {
			break
		}
		from, a = a.pose, a2
	}
	pose := a.pose
	res.KeyOverlap = a.overlap
	res.system = a.all
	// The residual and pairs are those of the last step at full
	// resolution, taken from the pose before it: that step moved the
	// camera by less than StopShift/StopTurn, or by what the iterations
	// left, and a pass over the frame to measure them again at the
	// final pose cost a tenth of the tracking time.
	sys := &a.last
	res.CamToWorld = pose
	res.Pairs = sys.Pairs
	res.RMS = sys.RMS()
	// The share of the pixels that land on the model which pair with it
	// (pixels beyond the model, such as a far wall the volume does not
	// hold, say nothing either way).
	res.InlierRatio = float64(sys.Pairs) / max(1, float64(a.cands))
	moved := predicted.Inv().Mul(pose)
	_, turn := moved.AxisAngle()
	switch {
	case res.InlierRatio < t.opt.MinInlierRatio:
		res.Lost, res.Reason = true, fmt.Sprintf("only %.0f%% of the frame matched the model (need %.0f%%)", 100*res.InlierRatio, 100*t.opt.MinInlierRatio)
	case res.RMS > t.opt.MaxRMS:
		res.Lost, res.Reason = true, fmt.Sprintf("residual %.1f mm above %.1f mm", res.RMS*1000, t.opt.MaxRMS*1000)
	case r3.Norm(moved.T) > t.opt.MaxShift || turn > t.opt.MaxTurn:
		res.Lost, res.Reason = true, fmt.Sprintf("jump of %.0f mm / %.1f° from the prediction", r3.Norm(moved.T)*1000, turn*180/math.Pi)
	}
	if res.Lost {
		res.CamToWorld = predicted
	}
	t.placed, t.placedPose = !res.Lost, res.CamToWorld
	return res, nil
}

// A frame tracked farther than this from its prediction is tracked
// again from the result (TrackColor), and again while a run moves it
// this far, up to maxRealign times: the second frame of a 120-frame
// handheld labelbox sweep, 24 mm from its prediction (no motion model
// yet), stopped 0.26° off after one more run and 0.11° after three.
const (
	retrackShift = 0.005
	retrackTurn  = 0.5 * math.Pi / 180
	maxRealign   = 3
)

// alignment is what align reaches: the pose, the share of the frame's
// pixels that paired with the keyframe's colour (colour only), and the
// point-to-plane system of the last step at full resolution with its
// number of candidates (pixels that landed on the model).
type alignment struct {
	pose    mesh.Pose
	overlap float64
	last    mesh.PlaneSystem
	all     mesh.PlaneSystem // last, with the colour rows
	cands   int
}

// align runs the coarse-to-fine iterations from start (also the pose
// the damping pulls toward) and returns what it reached, and why the
// frame is lost when a step cannot be taken.
func (t *Tracker) align(ctx context.Context, start mesh.Pose, colour bool) (a alignment, lost string, err error) {
	gain := [2]float64{1, 0}
	pose := start
	cosMax := math.Cos(t.opt.MaxNormalAngle)
	worldToModel := t.modelPose.Inv()
	for l := pyramidLevels - 1; l >= 0; l-- {
		for it := 0; it < t.opt.Iterations[l]; it++ {
			if err := ctx.Err(); err != nil {
				return alignment{pose: pose}, "", err
			}
			sys, cands, sums, overlap := t.pass(l, pose, worldToModel, t.opt.MaxDistance[l], cosMax, colour, gain)
			a.pose = pose
			if l == 0 {
				a.last, a.all, a.cands = sys.icp, sys.all, cands
			}
			if colour {
				a.overlap = overlap
				gain = fitGain(sums)
			}
			if sys.all.Pairs < 30 {
				return a, fmt.Sprintf("only %d pixel pairs at pyramid level %d", sys.all.Pairs, l), nil
			}
			st, angle, shift, ok := sys.all.StepToward(t.opt.Damping, pose.Mul(start.Inv()))
			if !ok {
				return a, "the scene does not constrain the camera (degenerate point-to-plane system)", nil
			}
			pose = st.Mul(pose).Orthonormalize()
			if angle < t.opt.StopTurn && shift < t.opt.StopShift {
				break
			}
		}
	}
	a.pose = pose
	return a, "", nil
}

// passSums is the outcome of one tracking pass: the point-to-plane
// pairs alone, and with the colour term's rows added.
type passSums struct {
	icp, all mesh.PlaneSystem
}

// pass runs one iteration's pass over level l's samples moved by
// camToWorld: each sample with a normal is projected into the model map
// and paired with the model point and normal found there (projective
// data association), and with colour each sample also adds the colour
// term against the keyframe (photometric.go). It returns the summed
// systems, the number of candidates (samples that landed on a model
// pixel, before the distance and angle tests) and, with colour, the
// gain sums and keyframe overlap of colourTerm.
func (t *Tracker) pass(l int, camToWorld, worldToModel mesh.Pose, maxD, cosMax float64, colour bool, gain [2]float64) (sums passSums, cands int, gainSums [5]float64, overlap float64) {
	lv := &t.levels[l]
	nBands := len(lv.bands) - 1
	if cap(t.parts) < nBands {
		t.parts = make([]bandSums, nBands)
	}
	parts := t.parts[:nBands]
	mi := t.model.Intr
	mw, mh := mi.Width, mi.Height
	points, normals := t.model.Points, t.model.Normals
	maxD2 := maxD * maxD
	camToModel := worldToModel.Mul(camToWorld)
	cm, cw := newAffine(camToModel), newAffine(camToWorld)
	var ct colourTerm
	cstep := 1
	if colour {
		if l == 0 {
			cstep = max(1, t.opt.ColorSubsample)
		}
		ct = t.colourTerm(l, camToWorld, gain, cstep)
	}
	par.For(nBands, t.opt.Workers, func(k int) {
		bs := &parts[k]
		*bs = bandSums{}
		sys := &bs.icp
		if colour {
			// the colour term's sums are kept apart from the depth
			// pairs', so the two loops add in the same order as one
			from := (lv.bands[k] + cstep - 1) / cstep * cstep
			ct.addRange(&bs.photo, lv.samples, from, lv.bands[k+1], cstep, &cw)
		}
		for si := lv.bands[k]; si < lv.bands[k+1]; si++ {
			s := &lv.samples[si]
			v := s.v
			n := s.n
			if n == (r3.Vec{}) {
				continue
			}
			pm := cm.apply(v)
			if pm.Z <= 0 {
				continue
			}
			u := int(math.Floor(mi.Fx*pm.X/pm.Z + mi.Cx + 0.5))
			vv := int(math.Floor(mi.Fy*pm.Y/pm.Z + mi.Cy + 0.5))
			if u < 0 || vv < 0 || u >= mw || vv >= mh {
				continue
			}
			j := vv*mw + u
			nq := normals[j]
			if nq == (r3.Vec{}) {
				continue
			}
			bs.cands++
			p := cw.apply(v)
			q := points[j]
			if r3.Norm2(r3.Sub(p, q)) > maxD2 || r3.Dot(cw.rotate(n), nq) < cosMax {
				continue
			}
			// s.w weighs by the inverse variance of the pixel's axial
			// noise (Nguyen et al. 2012): far pixels are several times
			// noisier.
			sys.Add(p, q, nq, s.w)
		}
	})
	for k := range parts {
		sums.icp.Merge(&parts[k].icp)
		cands += parts[k].cands
	}
	sums.all = sums.icp
	if colour {
		cand, pair := 0, 0
		for k := range parts {
			pp := &parts[k].photo
			sums.all.Merge(&pp.sys)
			for m := range gainSums {
				gainSums[m] += pp.sums[m]
			}
			cand += pp.cand
			pair += pp.pair
		}
		overlap = float64(pair) / max(1, float64(cand))
	}
	return sums, cands, gainSums, overlap
}

// affine is a pose unpacked for hot loops (mesh.Pose.Apply is not
// inlined); it computes the same expressions in the same order, so the
// results are identical to the bit.
type affine struct {
	r00, r01, r02, r10, r11, r12, r20, r21, r22 float64
	tx, ty, tz                                  float64
}

func newAffine(p mesh.Pose) affine {
	r := p.R
	return affine{r[0][0], r[0][1], r[0][2], r[1][0], r[1][1], r[1][2], r[2][0], r[2][1], r[2][2], p.T.X, p.T.Y, p.T.Z}
}

// apply returns R·x + T.
func (a *affine) apply(x r3.Vec) r3.Vec {
	return r3.Vec{
		X: a.r00*x.X + a.r01*x.Y + a.r02*x.Z + a.tx,
		Y: a.r10*x.X + a.r11*x.Y + a.r12*x.Z + a.ty,
		Z: a.r20*x.X + a.r21*x.Y + a.r22*x.Z + a.tz,
	}
}

// rotate returns R·x.
func (a *affine) rotate(x r3.Vec) r3.Vec {
	return r3.Vec{
		X: a.r00*x.X + a.r01*x.Y + a.r02*x.Z,
		Y: a.r10*x.X + a.r11*x.Y + a.r12*x.Z,
		Z: a.r20*x.X + a.r21*x.Y + a.r22*x.Z,
	}
}

// gather fills lv.samples and lv.bands from the level's maps for pixel
// step step; lum is the level's luminance, or nil without colour.
func (lv *level) gather(step int, lum []float32, workers int) {
	w, h := lv.intr.Width, lv.intr.Height
	rows := (h + step - 1) / step
	nBands := (rows + trackBandRows - 1) / trackBandRows
	refSigma2 := axialSigma(0.5, 0) * axialSigma(0.5, 0)
	// Count each band's samples, place the bands one after another, then
	// fill them: on all cores, with the order of one row-by-row pass.
	if cap(lv.bands) < nBands+1 {
		lv.bands = make([]int, nBands+1)
	}
	lv.bands = lv.bands[:nBands+1]
	lv.bands[0] = 0
	par.For(nBands, workers, func(k int) {
		n := 0
		for r := k * trackBandRows; r < min((k+1)*trackBandRows, rows); r++ {
			row := lv.depth[r*step*w : (r*step+1)*w]
			for x := 0; x < w; x += step {
				if row[x] > 0 {
					n++
				}
			}
		}
		lv.bands[k+1] = n
	})
	for k := 0; k < nBands; k++ {
		lv.bands[k+1] += lv.bands[k]
	}
	total := lv.bands[nBands]
	if cap(lv.samples) < total {
		lv.samples = make([]trackSample, total)
	}
	lv.samples = lv.samples[:total]
	par.For(nBands, workers, func(k int) {
		si := lv.bands[k]
		for r := k * trackBandRows; r < min((k+1)*trackBandRows, rows); r++ {
			y := r * step
			for x := 0; x < w; x += step {
				i := y*w + x
				if lv.depth[i] <= 0 {
					continue
				}
				s := trackSample{v: lv.vert[i], n: lv.norm[i]}
				if s.n != (r3.Vec{}) {
					sg := axialSigma(s.v.Z, 0)
					s.w = lv.binWeight[lv.bin[i]] * refSigma2 / (sg * sg)
				}
				if lum != nil {
					s.lum = lum[i]
				}
				lv.samples[si] = s
				si++
			}
		}
	})
}

// buildPyramid fills the levels from a full-resolution depth image:
// each coarser depth averages the valid pixels of a 2×2 block that do
// not lie behind a depth jump from the block's nearest one (downDepth),
// and vertex and normal maps follow.
func (t *Tracker) buildPyramid(depth []float32, mask []bool) {
	// The masked depth goes to level 0, or to raw for the filter to
	// write level 0 from.
	in := t.levels[0].depth
	if t.opt.DepthFilter > 0 {
		if len(t.raw) != len(depth) {
			t.raw = make([]float32, len(depth))
			t.filterTmp = make([]float32, len(depth))
		}
		in = t.raw
	}
	copy(in, depth)
	if mask != nil {
		for i, m := range mask {
			if !m {
				in[i] = 0
			}
		}
	}
	if t.opt.DepthFilter > 0 {
		bilateralDepth(in, t.levels[0].depth, t.filterTmp, t.intr.Width, t.intr.Height, t.opt.DepthFilter, t.opt.Workers)
	}
	for l := 1; l < pyramidLevels; l++ {
		src, dst := &t.levels[l-1], &t.levels[l]
		downDepth(src.depth, src.intr.Width, dst.depth, dst.intr.Width, dst.intr.Height, t.opt.Workers)
	}
	for l := range t.levels {
		lv := &t.levels[l]
		// Normals from differences spanning about 3 mm at part
		// distances: adjacent pixels of the full image are too noisy.
		lv.valid = vertexNormalMaps(lv.depth, lv.intr, lv.vert, lv.norm, max(1, 3>>l), levelStep(l), t.opt.Workers)
		lv.equaliseNormals(levelStep(l), t.opt.Workers)
	}
}

// filteredDepth returns a copy of the depth the last Track or
// TrackColor aligned (its mask applied, then TrackOptions.DepthFilter).
func (t *Tracker) filteredDepth() []float32 {
	return slices.Clone(t.levels[0].depth)
}

// bilateralRadius and bilateralSpatial are the bilateral depth
// filter's window (2: 5×5 pixels) and spatial σ (pixels); rangeTable
// holds exp(−u²/2) for u in [0, 3) in rangeSteps steps.
const (
	bilateralRadius  = 2
	bilateralSpatial = 1.5
	rangeSteps       = 256
)

var rangeTable = func() (t [rangeSteps]float32) {
	for i := range t {
		u := 3 * (float64(i) + 0.5) / rangeSteps
		t[i] = float32(math.Exp(-u * u / 2))
	}
	return t
}()

// bilateralDepth writes to dst src (w×h, metres, 0 for none) smoothed
// by TrackOptions.DepthFilter's bilateral filter, separably (Pham & van
// Vliet 2005, "Separable bilateral filtering for fast video
// preprocessing", ICME, DOI 10.1109/ICME.2005.1521458): along each row,
// then along each column of the result, each valid pixel becomes the
// mean of the valid pixels within 2 of it, weighted by exp(−d²/(2·1.5²))
// for d pixels away and by exp(−u²/2) for a depth u range σ away (range
// σ = k·σ_z(z) at the centre pixel's depth z; none beyond 3). Ten
// samples a pixel instead of the full window's 25. Pixels without depth
// stay without. tmp holds the row pass (w·h). Rows are shared among
// workers goroutines; the result does not depend on their number.
func bilateralDepth(src, dst, tmp []float32, w, h int, k float64, workers int) {
	// tab[|d|] holds the spatial weight of a pixel d away times each
	// range weight of rangeTable: the products the sums take.
	var tab [bilateralRadius + 1][rangeSteps]float32
	for d := range tab {
		s := float32(math.Exp(-float64(d*d) / (2 * bilateralSpatial * bilateralSpatial)))
		for i, r := range rangeTable {
			tab[d][i] = s * r
		}
	}
	k3 := 3 * k
	forRows(h, workers, func(y int) {
		in, out := src[y*w:(y+1)*w], tmp[y*w:(y+1)*w]
		for x, z := range in {
			if !(z > 0) {
				out[x] = 0
				continue
			}
			scale := bilateralScale(z, k3)
			var sw, sz float32
			if x >= bilateralRadius && x < w-bilateralRadius {
				// The whole window, in the order of the loop below.
				q := in[x-2 : x+3 : x+3]
				w0 := rangeWeight(&tab[2], q[0], z, scale)
				w1 := rangeWeight(&tab[1], q[1], z, scale)
				w2 := rangeWeight(&tab[0], q[2], z, scale)
				w3 := rangeWeight(&tab[1], q[3], z, scale)
				w4 := rangeWeight(&tab[2], q[4], z, scale)
				sw = w0 + w1 + w2 + w3 + w4
				sz = w0*q[0] + w1*q[1] + w2*q[2] + w3*q[3] + w4*q[4]
			} else {
				for d := max(-bilateralRadius, -x); d <= min(bilateralRadius, w-1-x); d++ {
					q := in[x+d]
					wt := rangeWeight(&tab[max(d, -d)], q, z, scale)
					sw += wt
					sz += wt * q
				}
			}
			out[x] = sz / sw
		}
	})
	// The column pass: each pixel of an output row sums the same pixel
	// of the five rows around it, in window order (as the row pass adds).
	forRows(h, workers, func(y int) {
		centre := tmp[y*w : (y+1)*w]
		out := dst[y*w : (y+1)*w]
		if y < bilateralRadius || y >= h-bilateralRadius {
			for x, z := range centre {
				if !(z > 0) {
					out[x] = 0
					continue
				}
				scale := bilateralScale(z, k3)
				var sw, sz float32
				for d := max(-bilateralRadius, -y); d <= min(bilateralRadius, h-1-y); d++ {
					q := tmp[(y+d)*w+x]
					wt := rangeWeight(&tab[max(d, -d)], q, z, scale)
					sw += wt
					sz += wt * q
				}
				out[x] = sz / sw
			}
			return
		}
		r0 := tmp[(y-2)*w : (y-1)*w]
		r1 := tmp[(y-1)*w : y*w]
		r3 := tmp[(y+1)*w : (y+2)*w]
		r4 := tmp[(y+2)*w : (y+3)*w]
		r0, r1, r3, r4, out = r0[:len(centre)], r1[:len(centre)], r3[:len(centre)], r4[:len(centre)], out[:len(centre)]
		for x, z := range centre {
			if !(z > 0) {
				out[x] = 0
				continue
			}
			scale := bilateralScale(z, k3)
			q0, q1, q3, q4 := r0[x], r1[x], r3[x], r4[x]
			w0 := rangeWeight(&tab[2], q0, z, scale)
			w1 := rangeWeight(&tab[1], q1, z, scale)
			w2 := rangeWeight(&tab[0], z, z, scale)
			w3 := rangeWeight(&tab[1], q3, z, scale)
			w4 := rangeWeight(&tab[2], q4, z, scale)
			out[x] = (w0*q0 + w1*q1 + w2*z + w3*q3 + w4*q4) / (w0 + w1 + w2 + w3 + w4)
		}
	})
}

// bilateralScale is bilateralDepth's range table steps per metre of
// depth difference around depth z, for k3 = 3k: rangeSteps/(3k·σ_z(z))
// with axialSigma(z, 0)'s expression written out, so that it inlines.
func bilateralScale(z float32, k3 float64) float32 {
	zz := float64(z)
	return float32(rangeSteps / (k3 * (0.0012 + 0.0019*(zz-0.4)*(zz-0.4))))
}

// rangeWeight is the weight t gives a neighbour of depth q around a
// centre of depth z (0 beyond the table, as for a missing neighbour,
// whose difference is the centre's whole depth). Adding a 0 weight and
// a 0 product leaves bilateralDepth's sums as skipping the neighbour
// would: they are finite and start at +0.
func rangeWeight(t *[rangeSteps]float32, q, z, scale float32) float32 {
	u := abs32(q-z) * scale
	if !(u < rangeSteps) {
		return 0
	}
	return t[int(u)]
}

// inf32 is float32 +Inf.
var inf32 = float32(math.Inf(1))

// downJump is the depth step, as a fraction of the depth, beyond which
// downDepth treats two pixels of a block as lying on either side of a
// discontinuity: WeightOptions.EdgeJump's default, the step between
// neighbours at which the TSDF weights drop a pixel as straddling one.
const downJump = 0.02

// downDepth halves a depth image: each coarser depth averages the
// valid pixels of a 2×2 block that lie within max(3σ_z, downJump·z) of
// the block's nearest one, z, so that edges are not blurred across a
// depth jump. 3σ_z alone (3.6 mm at 0.5 m) also split blocks on a
// surface seen obliquely: on the table seen at 60° a full-resolution
// pixel at 0.5 m spans 1.6 mm of depth, and a coarse pixel's two, so
// the far pixels of such blocks were dropped and the coarser depth
// moved toward the block's near side, off its pixel's ray. Each coarser
// level placed the camera against that bias (tracking 119 frames of the
// seed-1 handheld labelbox sweep against a scene volume and keyframes
// at the true poses, from a constant-velocity prediction 1.25 mm off on
// average: 4.07 mm and 0.34° off on average after the coarsest level,
// 2.19 mm after the middle one), and the finest level had to walk the
// pose back, a few tenths of a millimetre a step (0.54 mm off on
// average at the end, 1.87 mm at worst). With downJump the coarsest
// level ends 0.94 mm off on average, the middle 0.58 mm, the finest
// 0.41 mm (1.70 mm at worst). Rows are shared among workers
// goroutines (0: all cores); each output pixel depends on its block
// alone.
func downDepth(src []float32, sw int, dst []float32, dw, dh, workers int) {
	forRows(dh, workers, func(y int) {
		top := src[2*y*sw : 2*y*sw+2*dw]
		bot := src[(2*y+1)*sw : (2*y+1)*sw+2*dw]
		out := dst[y*dw : (y+1)*dw]
		for x := range out {
			// The block's pixels in the order top-left, top-right,
			// bottom-left, bottom-right (the order of the sum).
			zs := [4]float32{top[2*x], top[2*x+1], bot[2*x], bot[2*x+1]}
			near := inf32
			for _, z := range zs {
				if z > 0 {
					near = min(near, z)
				}
			}
			if near == inf32 { // no valid pixel (+Inf counts as none)
				out[x] = 0
				continue
			}
			limit := max(3*float32(axialSigma(float64(near), 0)), downJump*near)
			var sum float32
			cnt := 0
			for _, z := range zs {
				if z > 0 && z-near <= limit {
					sum += z
					cnt++
				}
			}
			out[x] = sum / float32(cnt)
		}
	})
}

// vertexNormalMaps back-projects depth into vert and estimates normals
// by the cross product of central differences span pixels either side,
// oriented toward the camera; pixels without four valid neighbours
// within 5% of their depth get a zero normal, and so do all but every
// step-th pixel of every step-th row (tracking pairs no others: at the
// full image's step of 2 this is a quarter of the work). It returns the
// number of pixels with a normal. Bands of rows are shared among
// workers goroutines (0: all cores); each pixel depends on depth alone.
func vertexNormalMaps(depth []float32, intr mesh.Intrinsics, vert, norm []r3.Vec, span, step, workers int) int {
	w, h := intr.Width, intr.Height
	const rows = 16
	bands := (h + rows - 1) / rows
	par.For(bands, workers, func(b int) {
		for y := b * rows; y < min(h, (b+1)*rows); y++ {
			for x := 0; x < w; x++ {
				i := y*w + x
				z := depth[i]
				if z > 0 {
					vert[i] = intr.BackProject(float64(x), float64(y), float64(z))
				} else {
					vert[i] = r3.Vec{}
				}
			}
		}
	})
	counts := make([]int, bands)
	// The first column with a normal: a multiple of step, at least span
	// (stepping to it spares a division a pixel).
	x0 := (span + step - 1) / step * step
	par.For(bands, workers, func(b int) {
		for y := b * rows; y < min(h, (b+1)*rows); y++ {
			clear(norm[y*w : (y+1)*w])
			if y%step != 0 || y < span || y >= h-span {
				continue
			}
			for x := x0; x < w-span; x += step {
				i := y*w + x
				z := depth[i]
				if z <= 0 {
					continue
				}
				jump := 0.05 * z
				l, r, u, d := depth[i-span], depth[i+span], depth[i-span*w], depth[i+span*w]
				if l <= 0 || r <= 0 || u <= 0 || d <= 0 ||
					abs32(l-z) > jump || abs32(r-z) > jump || abs32(u-z) > jump || abs32(d-z) > jump {
					continue
				}
				n := r3.Cross(r3.Sub(vert[i+span], vert[i-span]), r3.Sub(vert[i+span*w], vert[i-span*w]))
				nn := r3.Dot(n, n)
				if nn == 0 {
					continue
				}
				s := 1 / math.Sqrt(nn)
				if r3.Dot(n, vert[i]) > 0 {
					s = -s
				}
				norm[i] = r3.Scale(s, n)
				counts[b]++
			}
		}
	})
	valid := 0
	for _, c := range counts {
		valid += c
	}
	return valid
}

func abs32(v float32) float32 {
	if v < 0 {
		return -v
	}
	return v
}
