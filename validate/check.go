package validate

import (
	"context"
	"errors"
	"fmt"
	"image"
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"
	"time"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
)

// CheckInput is what Check examines: one part's model and, optionally,
// what else is known about it.
type CheckInput struct {
	// Name names the part in the report.
	Name string
	// Model is the part's coloured surface in its part frame (see
	// CanonicalFrame), wound outward (counter-clockwise seen from
	// outside), in metres.
	Model *mesh.Mesh
	// Tables are the part's PPF tables (features.BuildTables on Cloud).
	Tables *features.Model
	// Cloud is the oriented cloud the tables were built from; nil takes
	// Tables.Cloud().
	Cloud *mesh.Cloud
	// Frames are real frames of the part (typically a sample of its
	// sweep) with the reference pose at which it stood in each;
	// optional.
	Frames []RealFrame
	// Confusers are the other parts of the cell's catalog (or the demo
	// bin, see DemoConfusers); optional.
	Confusers []NamedModel
	// Clutter are extra meshes strewn around the part in the synthetic
	// scenes besides the confusers' meshes (nil: two plain boxes); their
	// own part frames must rest on z = 0 as demo parts do (any frame
	// works: each rests in its most probable stable pose).
	Clutter []*mesh.Mesh
	// Sweep, when set, gives the sweep's cameras for the coverage.
	Sweep *SweepInput
	// Reference is the part's drawing model (CAD), in any frame and
	// wound outward; when set the model is compared with it (Compare).
	Reference *mesh.Mesh
	// SupportZ is the height, along the part frame's z, of the support
	// the part stood on during its sweep (PlaneHeight), when
	// SupportKnown.
	SupportZ     float64
	SupportKnown bool
}

// SweepInput is the sweep the model was made from, for the coverage
// (ComputeCoverage).
type SweepInput struct {
	// Intr is the sweep's camera and CamToWorld the pose of each frame
	// used, in the sweep's world frame.
	Intr       mesh.Intrinsics
	CamToWorld []mesh.Pose
	// Depths holds each frame's depth image (metres, 0 = none) or is nil
	// (see ComputeCoverage).
	Depths [][]float32
	// ModelToWorld places the part frame in the sweep's world frame (the
	// inverse of what CanonicalFrame removed).
	ModelToWorld mesh.Pose
	// Mesh is the surface whose coverage is counted, in the world frame;
	// nil takes the model with its openings patched (FindOpenings), so
	// that what the sweep never saw — the face it stood on, the holes —
	// is counted as unseen surface.
	Mesh *mesh.Mesh
}

// CheckOptions tunes Check.
type CheckOptions struct {
	// Views is the number of synthetic check views; 0 runs only the
	// checks that need none (the model's size and openings, real frames,
	// coverage, reference), and the verdict is then at best review.
	// DEFAULT: 60
	Views int
	// Scene sets up the views; its Seed is replaced by Seed.
	// DEFAULT: DefaultSceneOptions() (occluders hiding 0–50 % of the
	// part, 0–4 clutter objects)
	Scene SceneOptions
	// Seed seeds everything random in the check: the same input, options
	// and seed give the same result for any number of workers.
	// DEFAULT: 1
	Seed uint64
	// PlaneMargin: scene points less than this above the table are
	// removed before voting, as a cell with a calibrated bin floor or
	// conveyor does (common practice; it keeps the voting time within
	// bounds, as the table would otherwise make up most of the scene).
	// About 2σ of the axial noise at 0.4 m, 1.4σ at 0.8 m (Nguyen et al.
	// 2012): a larger margin shaves thin parts (the bracket's 4 mm
	// flange) off the scene, and the table's noise specks that survive
	// it are too small to be voted on (MinSegmentPixels).
	// DEFAULT: 0.0025
	PlaneMargin float64
	// Vote tunes the PPF voting; MaxHypotheses, Refine and Workers are
	// set by Check (SegmentHypotheses per piece, no refinement — the
	// check refines the hypotheses itself, see refineHypotheses — and
	// one worker per view), and ReferenceStep is lowered for small
	// pieces.
	// DEFAULT: features.DefaultVoteOptions()
	Vote features.VoteOptions
	// RefineSpacing is the spacing, as a share of the table cloud's,
	// of the model sample the hypotheses are refined with (ICP); 0
	// refines with the table cloud itself.
	// DEFAULT: 0
	RefineSpacing float64
	// RefineIterations bounds each of the two ICP stages of the
	// refinement. On 16 check views each of the valve, bracket and
	// labelbox, 8 found right poses as often as 15 (the second stage
	// starts close), and voting with refinement took 0.26 instead of
	// 0.34 CPU-seconds a view for the valve.
	// DEFAULT: 8
	RefineIterations int
	// MinSegmentPixels: connected pieces of the scene with fewer pixels
	// are not voted on (sensor specks).
	// DEFAULT: 40
	MinSegmentPixels int
	// MaxSegmentDiameters: pieces more than this many part diameters
	// across (the diagonal of their points' bounding box) cannot be the
	// part alone and are not voted on, as a cell filters blobs by size
	// (common practice). Twice, not once: a piece's box also holds the
	// noisy points along its silhouette, and a part seen from an angle
	// spans its full diameter.
	// DEFAULT: 2
	MaxSegmentDiameters float64
	// SegmentHypotheses is the number of hypotheses kept per piece
	// (the clusters with the most votes).
	// DEFAULT: 10
	SegmentHypotheses int
	// ScorePoints is the number of model points the scorers compare
	// (sampled evenly on the model).
	// DEFAULT: 1000
	ScorePoints int
	// ErrorPoints is the number of model points the pose errors average
	// over.
	// DEFAULT: 2000
	ErrorPoints int
	// ExtraWrong adds this many perturbed hypotheses per view
	// (PerturbedHypotheses) to the calibration sets, so that a part
	// whose votes are all right (a symmetric part) still has wrong
	// hypotheses to calibrate against. They never enter the recall.
	// DEFAULT: 3
	ExtraWrong int
	// Baseline tunes the inlier-count scorer.
	// DEFAULT: DefaultBaselineOptions()
	Baseline BaselineOptions
	// Point holds the point-difference scorer's options other than the
	// weights CalibrateWeights picks from Grid.
	// DEFAULT: DefaultPointScoreOptions()
	Point PointScoreOptions
	// Grid lists the weights tried.
	// DEFAULT: CheckWeightGrid()
	Grid WeightGrid
	// CalibrationRight and CalibrationWrong bound the voted hypotheses
	// per view the weights are calibrated on: the right and the wrong
	// ones with the most votes (the strongest contenders), besides the
	// perturbed ones (ExtraWrong).
	// DEFAULT: 4 and 8
	CalibrationRight, CalibrationWrong int
	// Calibration tunes the acceptance thresholds.
	// DEFAULT: DefaultCalibrationOptions()
	Calibration CalibrationOptions
	// Symmetry tunes the symmetry detection.
	// DEFAULT: DefaultSymmetryOptions()
	Symmetry SymmetryOptions
	// Stable tunes the resting poses.
	// DEFAULT: DefaultStableOptions()
	Stable StableOptions
	// Coverage tunes the coverage count.
	// DEFAULT: DefaultCoverageOptions()
	Coverage CoverageOptions
	// Compare tunes the comparison with the reference.
	// DEFAULT: DefaultCompareOptions()
	Compare CompareOptions
	// ConfuserViews is the number of scenes rendered per confuser in
	// each direction.
	// DEFAULT: 3
	ConfuserViews int
	// MaxRealFrames bounds the real frames scored (evenly chosen).
	// DEFAULT: 12
	MaxRealFrames int
	// RestsAsScanned says the cell presents the part resting as it
	// stood in its sweep (in a tray, a fixture, on a conveyor), not in
	// any resting pose (a bin): the views then show it only in the
	// resting pose nearest to standing on the support (CheckInput.SupportZ
	// must be known), and surface the sweep could not see from above —
	// the face it stood on, undersides — is no finding. False: the part
	// may rest in any of its stable poses.
	// DEFAULT: false
	RestsAsScanned bool
	// Rules decide the verdict.
	// DEFAULT: DefaultVerdictRules()
	Rules VerdictRules
	// Workers bounds the views processed at once; 0 means GOMAXPROCS.
	// The result does not depend on it.
	// DEFAULT: 0
	Workers int
	// Progress, when set, is called as the stages advance, from one
	// goroutine at a time.
	// DEFAULT: nil
	Progress func(stage string, done, total int)
}

// DefaultCheckOptions returns the documented defaults.
func DefaultCheckOptions() CheckOptions {
	return CheckOptions{
		Views:               60,
		Scene:               DefaultSceneOptions(),
		Seed:                1,
		PlaneMargin:         0.0025,
		Vote:                features.DefaultVoteOptions(),
		RefineSpacing:       0,
		RefineIterations:    8,
		MinSegmentPixels:    40,
		MaxSegmentDiameters: 2,
		SegmentHypotheses:   10,
		ScorePoints:         1000,
		ErrorPoints:         2000,
		ExtraWrong:          3,
		Baseline:            DefaultBaselineOptions(),
		Point:               DefaultPointScoreOptions(),
		Grid:                CheckWeightGrid(),
		CalibrationRight:    4,
		CalibrationWrong:    8,
		Calibration:         DefaultCalibrationOptions(),
		Symmetry:            DefaultSymmetryOptions(),
		Stable:              DefaultStableOptions(),
		Coverage:            DefaultCoverageOptions(),
		Compare:             DefaultCompareOptions(),
		ConfuserViews:       3,
		MaxRealFrames:       12,
		Rules:               DefaultVerdictRules(),
	}
}

// CheckWeightGrid is the weight grid Check calibrates on: 2 × 3 × 2 × 2
// = 24 combinations, the part of DefaultWeightGrid where the
// calibrations of the demo parts landed (TestCalibrateWeights), small
// enough to calibrate three times within the check's time budget.
func CheckWeightGrid() WeightGrid {
	return WeightGrid{
		NormalWeight:     []float64{0, 0.25},
		ColorWeight:      []float64{0, 0.25, 0.5},
		OcclusionPenalty: []float64{0.1, 0.3},
		FreeSpacePenalty: []float64{0.6, 1},
	}
}

// Validate reports options that cannot run a check.
func (o CheckOptions) Validate() error {
	if o.Views < 0 || o.Views == 1 || o.Views > 10000 {
		return fmt.Errorf("validate: check views %d, want 0 or 2..10000", o.Views)
	}
	if !(o.PlaneMargin >= 0) {
		return fmt.Errorf("validate: check PlaneMargin %v, want ≥ 0", o.PlaneMargin)
	}
	if o.ScorePoints < 50 || o.ScorePoints > 100000 || o.ErrorPoints < 50 || o.ErrorPoints > 100000 {
		return fmt.Errorf("validate: check ScorePoints %d and ErrorPoints %d, want 50..100000", o.ScorePoints, o.ErrorPoints)
	}
	if o.ExtraWrong < 0 || o.ExtraWrong > 100 || o.ConfuserViews < 0 || o.ConfuserViews > 100 || o.MaxRealFrames < 0 {
		return fmt.Errorf("validate: check ExtraWrong %d, ConfuserViews %d (0..100), MaxRealFrames %d (≥ 0)", o.ExtraWrong, o.ConfuserViews, o.MaxRealFrames)
	}
	if !(o.RefineSpacing >= 0 && o.RefineSpacing <= 1) || o.RefineIterations < 1 || o.RefineIterations > 1000 {
		return fmt.Errorf("validate: check RefineSpacing %v (0..1), RefineIterations %d (1..1000)", o.RefineSpacing, o.RefineIterations)
	}
	if o.MinSegmentPixels < 1 || !(o.MaxSegmentDiameters > 0) || o.SegmentHypotheses < 1 || o.SegmentHypotheses > 100 {
		return fmt.Errorf("validate: check MinSegmentPixels %d (≥ 1), MaxSegmentDiameters %v (> 0), SegmentHypotheses %d (1..100)", o.MinSegmentPixels, o.MaxSegmentDiameters, o.SegmentHypotheses)
	}
	if o.CalibrationRight < 1 || o.CalibrationWrong < 1 {
		return fmt.Errorf("validate: check CalibrationRight %d and CalibrationWrong %d, want ≥ 1", o.CalibrationRight, o.CalibrationWrong)
	}
	if o.Workers < 0 {
		return fmt.Errorf("validate: check Workers %d", o.Workers)
	}
	if err := o.Point.Validate(); err != nil {
		return err
	}
	sc := o.Scene
	sc.Seed = o.Seed
	if err := sc.Validate(); err != nil {
		return err
	}
	return o.Rules.Validate()
}

// HypothesisResult is one pose hypothesis in a check view.
type HypothesisResult struct {
	// ModelToCam is the hypothesis (refined by ICP) and Votes its
	// support in the PPF vote.
	ModelToCam mesh.Pose `json:"-"`
	Votes      float64   `json:"votes"`
	// ADD is its error from the true pose (metres); Correct applies the
	// 10 %-of-diameter criterion to ADD, or to ADD-S for a part whose
	// shape is symmetric (ADD-S is computed only that far: see
	// addsBelow).
	ADD     float64 `json:"add_m"`
	Correct bool    `json:"correct"`
	// Extra marks a perturbed hypothesis added for calibration only.
	Extra bool `json:"extra,omitempty"`
	// Baseline is the inlier-count score; Point the point-difference
	// score with the weights calibrated on all views, and PointHeldOut
	// with the weights calibrated on the other half of the views (the
	// score the recall uses).
	Baseline     float64 `json:"baseline"`
	Point        float64 `json:"point"`
	PointHeldOut float64 `json:"point_held_out"`
}

// ViewResult is one synthetic check view.
type ViewResult struct {
	// Index is the scene number.
	Index int `json:"index"`
	// Truth is the part's true pose.
	Truth mesh.Pose `json:"-"`
	// StablePose is the resting pose used, VisibleFraction the share of
	// the part's pixels not hidden by the occluder, Clutter the number
	// of clutter objects.
	StablePose      int     `json:"stable_pose"`
	VisibleFraction float64 `json:"visible_fraction"`
	Clutter         int     `json:"clutter"`
	// Unscanned is the share of the part's visible pixels that fall on
	// surface the model lacks (its patched openings: the face it stood on
	// during the sweep, holes); such a view asks the cell to find the
	// part by a side the scan never saw.
	Unscanned float64 `json:"unscanned_share"`
	// Hypotheses are the vote's hypotheses (best votes first), then the
	// extra ones.
	Hypotheses []HypothesisResult `json:"hypotheses"`
	// BestBaseline, BestPoint and BestVotes index the hypothesis each
	// ranking chooses (−1: none); the point scorer ranks by
	// PointHeldOut.
	BestBaseline int `json:"best_baseline"`
	BestPoint    int `json:"best_point"`
	BestVotes    int `json:"best_votes"`
	// MSSD and ColorCorrect of the chosen hypotheses: by the baseline
	// [0], the point scorer [1] and the votes [2]. ColorCorrect: right
	// also the right way round by the colours — the smallest ADD from
	// the truth turned by a symmetry of shape and colour together is
	// below 10 % of the diameter (a labelled box turned over is right
	// by ADD-S but not here); MSSD, over the same symmetries, is +Inf
	// without a choice.
	MSSD         [3]float64 `json:"-"`
	ColorCorrect [3]bool    `json:"color_correct"`

	thumb *image.NRGBA
	intr  mesh.Intrinsics
	obs   *Observation
}

// Chose returns whether the ranking k (0 baseline, 1 point, 2 votes)
// chose a correct hypothesis in the view.
func (v *ViewResult) Chose(k int) bool {
	i := [3]int{v.BestBaseline, v.BestPoint, v.BestVotes}[k]
	return i >= 0 && v.Hypotheses[i].Correct
}

// ScorerFigures is how one ranking of the hypotheses fared.
type ScorerFigures struct {
	// Name of the scorer.
	Name string `json:"name"`
	// Recall is the share of views whose best-ranked hypothesis is
	// correct (ADD, or ADD-S for a part whose shape is symmetric, < 10 %
	// of the diameter: Hinterstoisser et al. 2012); ColorRecall the
	// share also right the way round its colours tell (see
	// ViewResult.ColorCorrect); MSSDRecall the BOP average recall of MSSD over the
	// thresholds 5–50 % of the diameter.
	Recall      float64 `json:"recall"`
	ColorRecall float64 `json:"color_recall"`
	MSSDRecall  float64 `json:"mssd_average_recall"`
	// ScannedRecall is the recall over the views that show little
	// unscanned surface (ViewResult.Unscanned ≤ maxUnscanned), Scanned
	// their number; ExposedRecall the recall over the others.
	ScannedRecall, ExposedRecall float64
	Scanned                      int
	// AcceptedRecall is the share of views whose best-ranked hypothesis
	// is correct and scores at or above the calibrated threshold: the
	// recall of a cell that accepts only poses scoring that high (0
	// without a calibration).
	AcceptedRecall float64 `json:"accepted_recall"`
	// ScannedAcceptedRecall is AcceptedRecall over the Scanned views.
	ScannedAcceptedRecall float64 `json:"scanned_accepted_recall"`
	// Calibration of the acceptance threshold on the scores of right
	// and wrong hypotheses (nil for the vote ranking, or when a set was
	// empty); Right and Wrong are those scores.
	Calibration *Calibration `json:"calibration,omitempty"`
	Right       []float64    `json:"-"`
	Wrong       []float64    `json:"-"`
}

// CheckResult is everything a check found; Report turns it into a
// report.
type CheckResult struct {
	Name string
	// Diameter and Area of the model; Symmetric reports a symmetry of
	// its shape (ADD-S decides correctness).
	Diameter, Area    float64
	Symmetric         bool
	GeometrySymmetric bool
	Stable            *StableResult
	Symmetry          *SymmetryReport
	// RestsAsScanned reports that the views showed the part only in
	// its resting pose of the sweep (CheckOptions.RestsAsScanned), the
	// pose Stable.Poses[ScannedRest]; ScannedRest is −1 otherwise.
	RestsAsScanned bool
	ScannedRest    int
	// Views are the synthetic check views.
	Views []ViewResult
	// Baseline, Point and Votes are the three rankings of the vote's
	// hypotheses: the inlier-count baseline, the point-difference score
	// and the PPF votes themselves; Oracle is the share of views with
	// at least one correct hypothesis (the ceiling of any scorer).
	Baseline, Point, Votes ScorerFigures
	Oracle                 float64
	// PointOptions are the point scorer's options with the weights
	// calibrated on all views: what the cell should use, with
	// Point.Calibration's threshold. WeightsNote says how the
	// calibration went.
	PointOptions PointScoreOptions
	WeightsNote  string
	// Openings are the model's holes; Coverage (with CoverageMesh, its
	// surface in the world frame) the sweep's coverage; Comparison the
	// comparison with the reference; Real the real-frame check;
	// Confusers the parts checked against. Each is nil when not run.
	Openings     *Openings
	Coverage     *Coverage
	CoverageMesh *mesh.Mesh
	Comparison   *Comparison
	Real         *RealFrameResult
	Confusers    []PartConfusion
	// Verdict and Reasons are the outcome (VerdictRules.Judge).
	Verdict Verdict
	Reasons []Reason
	// Timings of the stages, Settings the options in words, Notes
	// anything else worth a line.
	Timings  []Timing
	Settings []Setting
	Notes    []string

	model       *mesh.Mesh
	worldToPart mesh.Pose   // the coverage mesh's frame to the part frame
	syms        []mesh.Pose // symmetry transforms by shape and colour
}

// Check proves whether a part's model lets a PPF-based cell find it.
//
//  1. The model's resting poses (StablePoses on its convex hull), its
//     rotational symmetries of geometry and of colour (DetectSymmetry),
//     and its openings (FindOpenings).
//  2. opt.Views synthetic scenes (NewSceneGenerator): the model in a
//     resting pose on a textured table among clutter (the confusers'
//     meshes and boxes), seen from the upper view sphere, an occluder
//     hiding up to half of it, structured-light noise (Nguyen et al.
//  2012. and varied light. In each, the scene cloud without the
//     table (PlaneMargin) is voted on with the part's tables
//     (features.Vote, refined by ICP on the scene at a quarter of the
//     spacing) and each hypothesis is scored by the inlier-count
//     baseline (BaselineScore) and the point-difference score
//     (PointScore), and labelled right or wrong by ADD (ADD-S for a
//     symmetric part) against the truth. Views run in parallel.
//  3. The point score's weights are calibrated (CalibrateWeights) on
//     the labelled hypotheses: on all views for the cell, and on each
//     half of the views (even and odd scene numbers) for the other half,
//     so that the recall the report gives is measured on views the
//     weights were not fitted to. Each scorer's recall is the share of
//     views whose best-scored hypothesis is right; its acceptance
//     threshold and margin come from the scores of right and wrong
//     hypotheses (Calibrate).
//  4. When given: the real frames (CheckRealFrames), the confusers
//     (CheckConfusers), the sweep's coverage (ComputeCoverage), the
//     comparison with the reference (CompareContext).
//  5. The verdict (VerdictRules.Judge).
//
// The result depends only on the input, the options and the seed, not
// on the number of workers.
func Check(ctx context.Context, in CheckInput, opt CheckOptions) (*CheckResult, error) {
	if err := opt.Validate(); err != nil {
		return nil, err
	}
	if in.Model == nil || in.Tables == nil {
		return nil, errors.New("validate: check needs the model and its tables")
	}
	if err := in.Model.Validate(); err != nil {
		return nil, fmt.Errorf("validate: check model: %w", err)
	}
	if len(in.Model.Faces) == 0 {
		return nil, fmt.Errorf("validate: check model has no faces: %w", mesh.ErrDegenerate)
	}
	cloud := in.Cloud
	if cloud == nil {
		cloud = in.Tables.Cloud()
	}
	if features.CloudHash(cloud) != in.Tables.CloudHash {
		return nil, fmt.Errorf("validate: check: %w", features.ErrWrongCloud)
	}
	name := in.Name
	if name == "" {
		name = "part"
	}
	res := &CheckResult{Name: name, model: in.Model}
	clock := time.Now()
	lap := func(stage string) {
		now := time.Now()
		res.Timings = append(res.Timings, Timing{Stage: stage, Seconds: now.Sub(clock).Seconds()})
		clock = now
	}
	progress := func(stage string, done, total int) {
		if opt.Progress != nil {
			opt.Progress(stage, done, total)
		}
	}
	workers := opt.Workers
	if workers == 0 {
		workers = runtime.GOMAXPROCS(0)
	}

	// 1. The model.
	m := in.Model
	res.Diameter = m.Diameter()
	res.Area = m.Area()
	if !(res.Diameter > 0) || !(res.Area > 0) {
		return nil, fmt.Errorf("validate: check model has no extent: %w", mesh.ErrDegenerate)
	}
	supportZ := math.NaN()
	if in.SupportKnown {
		supportZ = in.SupportZ
	}
	var err error
	if res.Openings, err = FindOpenings(m, supportZ, 0); err != nil {
		return nil, err
	}
	if in.Sweep != nil && len(in.Sweep.CamToWorld) > 0 {
		worldToModel := in.Sweep.ModelToWorld.Inv()
		cams := make([]r3.Vec, len(in.Sweep.CamToWorld))
		for i, c := range in.Sweep.CamToWorld {
			cams[i] = worldToModel.Apply(c.T)
		}
		res.Openings.MarkRecesses(m, cams)
	}
	plausible := res.Diameter >= opt.Rules.MinDiameter && res.Diameter <= opt.Rules.MaxDiameter
	if !plausible {
		// A model in the wrong unit cannot be rendered into a sensible
		// scene; the verdict says why.
		res.Notes = append(res.Notes, fmt.Sprintf("the synthetic views were not rendered: the model is %.4g m across", res.Diameter))
		return finishCheck(ctx, res, in, opt, lap)
	}
	progress("model", 0, 1)
	if res.Stable, err = StablePoses(m, opt.Stable); err != nil {
		return nil, fmt.Errorf("validate: check resting poses: %w", err)
	}
	res.ScannedRest = -1
	if opt.RestsAsScanned {
		if !in.SupportKnown {
			return nil, fmt.Errorf("validate: check: the part rests as scanned, but where it stood (CheckInput.SupportZ) is not known")
		}
		// The resting pose whose face points most nearly down the part
		// frame's z axis: the way the part stood on its support. Within
		// 15°, as a fused resting face is cut a voxel above the support
		// and its outline is a little ragged.
		best, bestDot := -1, math.Cos(15*math.Pi/180)
		for i, p := range res.Stable.Poses {
			if d := -p.Normal.Z; d >= bestDot {
				best, bestDot = i, d
			}
		}
		if best < 0 {
			// The model does not rest stably that way (a scan too rough
			// for its resting face to be flat, or a part balanced on a
			// fixture): stand it exactly as it stood, over its centroid.
			c, _, _ := surfaceMoments(m)
			res.Stable.Poses = append(res.Stable.Poses, StablePose{
				ModelToSupport: mesh.Pose{R: mesh.Identity3(), T: r3.Vec{X: -c.X, Y: -c.Y, Z: -in.SupportZ}},
				Normal:         r3.Vec{Z: -1},
				Height:         c.Z - in.SupportZ,
			})
			best = len(res.Stable.Poses) - 1
			res.Notes = append(res.Notes, "none of the model's resting poses stands it on the face it stood on in its sweep (within 15°): the views stand it exactly as it stood")
		}
		res.RestsAsScanned, res.ScannedRest = true, best
	}
	symOpt := opt.Symmetry
	symOpt.Seed = opt.Seed
	if res.Symmetry, err = DetectSymmetry(m, symOpt); err != nil {
		return nil, fmt.Errorf("validate: check symmetry: %w", err)
	}
	steps := ContinuousSymmetrySteps(res.Diameter/2, res.Diameter, 0.01)
	geomSyms, err := res.Symmetry.GeometryPoses(steps)
	if err != nil {
		return nil, fmt.Errorf("validate: check symmetry group: %w", err)
	}
	colorSyms, err := res.Symmetry.ColorPoses(steps)
	if err != nil {
		return nil, fmt.Errorf("validate: check colour symmetry group: %w", err)
	}
	res.Symmetric = len(geomSyms) > 1
	res.syms = colorSyms
	progress("model", 1, 1)
	lap("model: resting poses, symmetry, openings")

	// Samples of the model for scoring, errors and refinement.
	pc, err := newPartCheck(m, in.Tables, colorSyms, res.Symmetric, opt)
	if err != nil {
		return nil, err
	}
	if len(res.Openings.List) > 0 {
		c := meanColor(m)
		pc.scene = res.Openings.PatchedMesh(m, c, c)
		pc.scene.Normals = pc.scene.VertexNormals()
	}
	if len(colorSyms) < len(geomSyms) && len(geomSyms) <= maxExpand {
		for _, g := range geomSyms {
			if !isIdentity(g, 1e-6) {
				pc.expand = append(pc.expand, g)
			}
		}
	}
	lap("model samples")

	// 2. The views.
	if opt.Views > 0 {
		clutter := append([]*mesh.Mesh(nil), in.Clutter...)
		if in.Clutter == nil {
			clutter = defaultClutter()
		}
		for _, c := range in.Confusers {
			if c.Mesh != nil {
				clutter = append(clutter, c.Mesh)
			}
		}
		sopt := opt.Scene
		sopt.Seed = opt.Seed
		res.Views = make([]ViewResult, opt.Views)
		poses := res.Stable.Poses
		if res.ScannedRest >= 0 {
			p := poses[res.ScannedRest]
			p.Probability = 1
			poses = []StablePose{p}
		}
		if err := pc.runViews(ctx, poses, clutter, sopt, res.Views, workers, progress); err != nil {
			return nil, err
		}
		if res.ScannedRest >= 0 {
			for i := range res.Views {
				res.Views[i].StablePose = res.ScannedRest
			}
		}
		lap("views: render, vote, score")

		// 3. Weights, recall, thresholds.
		if err := pc.calibrate(res, workers); err != nil {
			return nil, err
		}
		lap("calibration")
		pc.figures(res)
		for i := range res.Views {
			res.Views[i].obs = nil
		}
		lap("figures")
	} else {
		res.Notes = append(res.Notes, "no synthetic views were rendered (Views = 0)")
	}

	// 4. Real frames and confusers need the calibrated scorer.
	if len(in.Frames) > 0 {
		if res.Real, err = pc.realFrames(ctx, in.Frames, supportZ, res, opt, workers, progress); err != nil {
			return nil, err
		}
		lap("real frames")
	}
	if len(in.Confusers) > 0 && opt.ConfuserViews > 0 {
		if res.Confusers, err = pc.confusers(ctx, in.Confusers, res, opt, workers, progress); err != nil {
			return nil, err
		}
		lap("confusers")
	}
	return finishCheck(ctx, res, in, opt, lap)
}

// finishCheck runs the stages that do not need the views (coverage,
// comparison) and the verdict.
func finishCheck(ctx context.Context, res *CheckResult, in CheckInput, opt CheckOptions, lap func(string)) (*CheckResult, error) {
	var err error
	if in.Sweep != nil && len(in.Sweep.CamToWorld) > 0 {
		cm := in.Sweep.Mesh
		if cm == nil {
			cm = res.Openings.PatchedMesh(in.Model, mesh.RGB{R: 180, G: 180, B: 185}, mesh.RGB{R: 255, G: 0, B: 255}).Transform(in.Sweep.ModelToWorld)
		}
		copt := opt.Coverage
		if opt.Progress != nil {
			copt.Progress = func(done, total int) { opt.Progress("coverage", done, total) }
		}
		if res.Coverage, err = ComputeCoverage(ctx, cm, in.Sweep.Intr, in.Sweep.CamToWorld, in.Sweep.Depths, copt); err != nil {
			return nil, fmt.Errorf("validate: check coverage: %w", err)
		}
		res.CoverageMesh = cm
		res.worldToPart = in.Sweep.ModelToWorld.Inv()
		lap("coverage")
	}
	if in.Reference != nil {
		if res.Comparison, err = CompareContext(ctx, in.Model, in.Reference, opt.Compare); err != nil {
			return nil, fmt.Errorf("validate: check against the reference: %w", err)
		}
		lap("reference comparison")
	}
	res.Reasons = opt.Rules.Judge(res)
	res.Verdict = VerdictReady
	for _, r := range res.Reasons {
		if r.Verdict.rank() > res.Verdict.rank() {
			res.Verdict = r.Verdict
		}
	}
	res.Settings = append(res.Settings,
		Setting{"views", fmt.Sprint(opt.Views)},
		Setting{"seed", fmt.Sprint(opt.Seed)},
		Setting{"resting poses", map[bool]string{true: "as it stood in the sweep (tray, fixture, conveyor)", false: "any stable pose (a bin)"}[opt.RestsAsScanned]},
		Setting{"occlusion", fmt.Sprintf("%.0f–%.0f %%", 100*opt.Scene.MinOcclusion, 100*opt.Scene.MaxOcclusion)},
		Setting{"clutter objects", fmt.Sprintf("%d–%d", opt.Scene.MinClutter, opt.Scene.MaxClutter)},
		Setting{"camera distance", fmt.Sprintf("%.2f–%.2f m", opt.Scene.MinDistance, opt.Scene.MaxDistance)},
		Setting{"PPF reference step", fmt.Sprint(opt.Vote.ReferenceStep)},
		Setting{"point-score weights (normal, colour, occlusion, free space)", fmt.Sprintf("%.2g, %.2g, %.2g, %.2g",
			res.PointOptions.NormalWeight, res.PointOptions.ColorWeight, res.PointOptions.OcclusionPenalty, res.PointOptions.FreeSpacePenalty)},
		Setting{"largest false-accept rate of the thresholds", fmt.Sprintf("%.3g", opt.Calibration.MaxFalseAccept)},
	)
	return res, ctx.Err()
}

// defaultClutter returns two plain boxes (a carton and a small block).
func defaultClutter() []*mesh.Mesh {
	return []*mesh.Mesh{
		boxSolid(0.07, 0.05, 0.04, mesh.RGB{R: 170, G: 130, B: 85}),
		boxSolid(0.03, 0.03, 0.05, mesh.RGB{R: 60, G: 90, B: 160}),
	}
}

// boxSolid returns a closed box [−a/2, a/2]×[−b/2, b/2]×[0, c] of one
// colour, faces wound outward.
func boxSolid(a, b, c float64, col mesh.RGB) *mesh.Mesh {
	m := plateMesh(a/2, b/2, c)
	m.Colors = make([]mesh.RGB, len(m.Vertices))
	for i := range m.Colors {
		m.Colors[i] = col
	}
	// plateMesh's bottom faces −z; its side faces are wound outward.
	return m
}

// partCheck holds what every view of one part needs.
type partCheck struct {
	model *mesh.Mesh
	// scene is what the synthetic scenes render: the model with its
	// openings patched (Openings.PatchedMesh), standing in for the real,
	// closed part; the cell still looks for it with the model's own
	// tables and samples. A scan is open where the sweep never looked
	// (the face it stood on, at least); rendered open, a resting pose
	// that shows that side would show the model's inside as well, which
	// no real part has.
	scene      *mesh.Mesh
	tables     *features.Model
	score      *ScoreModel
	errs       *ErrorModel
	refine     *mesh.Cloud
	symmetric  bool        // by shape: ADD-S decides
	expand     []mesh.Pose // shape symmetries the colour breaks (identity left out)
	centre     r3.Vec
	opt        CheckOptions
	calibrated PointScoreOptions
	heldOut    [2]PointScoreOptions // weights fitted on even [0] and odd [1] views
}

// maxUnscanned is the largest share of a view's part pixels on
// unscanned surface for which the view still counts as showing the part
// by what was scanned: a few per cent is the rim of the face it stood on
// seen edge-on.
const maxUnscanned = 0.05

// unscannedShare returns the share of the part's pixels in the scene
// that fall on the patches closing the model's openings (the triangles
// PatchedMesh appends after the model's own).
func (pc *partCheck) unscannedShare(sc *Scene) float64 {
	if pc.scene == pc.model {
		return 0
	}
	n := uint32(len(pc.model.Faces))
	var part, patch int
	fr := sc.Frame
	for i, o := range fr.Object {
		if o != ScenePart {
			continue
		}
		part++
		if t := fr.Triangle[i]; t >= 0 && uint32(t) >= n {
			patch++
		}
	}
	if part == 0 {
		return 0
	}
	return float64(patch) / float64(part)
}

// meanColor returns the mean vertex colour of m (mid grey without
// colours): the colour a patch standing in for unseen surface gets.
func meanColor(m *mesh.Mesh) mesh.RGB {
	if len(m.Colors) == 0 {
		return mesh.RGB{R: 128, G: 128, B: 128}
	}
	var r, g, b float64
	for _, c := range m.Colors {
		r, g, b = r+float64(c.R), g+float64(c.G), b+float64(c.B)
	}
	n := float64(len(m.Colors))
	return mesh.RGB{R: uint8(r/n + 0.5), G: uint8(g/n + 0.5), B: uint8(b/n + 0.5)}
}

// evenSample samples about n points evenly on m (a spacing at which n
// discs fill the area in a random close packing: s = √(0.55·A/n)).
func evenSample(m *mesh.Mesh, n int, seed uint64) (*mesh.Cloud, error) {
	so := mesh.DefaultSampleOptions()
	so.Spacing = math.Sqrt(0.55 * m.Area() / float64(n))
	so.Seed = seed
	if m.Normals == nil {
		so.Normals = mesh.NormalsFace
	}
	c, _, err := mesh.Sample(m, so)
	return c, err
}

// newPartCheck prepares one part: syms are its symmetry transforms by
// shape and colour together (for MSSD and the colour-aware recall),
// symmetric whether its shape is symmetric.
func newPartCheck(m *mesh.Mesh, tables *features.Model, syms []mesh.Pose, symmetric bool, opt CheckOptions) (*partCheck, error) {
	pc := &partCheck{model: m, scene: m, tables: tables, symmetric: symmetric, opt: opt}
	sc, err := evenSample(m, opt.ScorePoints, opt.Seed)
	if err != nil {
		return nil, fmt.Errorf("validate: check score sample: %w", err)
	}
	if pc.score, err = NewScoreModel(sc); err != nil {
		return nil, err
	}
	ec, err := evenSample(m, opt.ErrorPoints, opt.Seed+1)
	if err != nil {
		return nil, fmt.Errorf("validate: check error sample: %w", err)
	}
	if pc.errs, err = NewErrorModel(ec.Points, syms); err != nil {
		return nil, err
	}
	pc.refine = tables.Cloud()
	if opt.RefineSpacing > 0 {
		so := mesh.DefaultSampleOptions()
		so.Spacing = opt.RefineSpacing * tables.Spacing
		so.Seed = opt.Seed + 2
		if m.Normals == nil {
			so.Normals = mesh.NormalsFace
		}
		if a := m.Area(); a/(so.Spacing*so.Spacing) > 40000 {
			// At most about 20,000 refinement points.
			so.Spacing = math.Sqrt(0.55 * a / 20000)
		}
		if pc.refine, _, err = mesh.Sample(m, so); err != nil {
			return nil, fmt.Errorf("validate: check refinement sample: %w", err)
		}
	}
	pc.centre = centroidOf(sc.Points)
	pc.calibrated = opt.Point
	pc.heldOut = [2]PointScoreOptions{opt.Point, opt.Point}
	return pc, nil
}

// runViews renders, votes and scores every view, workers at a time,
// each with its own scene generator.
func (pc *partCheck) runViews(ctx context.Context, poses []StablePose, clutter []*mesh.Mesh, sopt SceneOptions,
	out []ViewResult, workers int, progress func(string, int, int)) error {
	workers = max(1, min(workers, len(out)))
	gens := make(chan *SceneGenerator, workers)
	for w := 0; w < workers; w++ {
		g, err := NewSceneGenerator(pc.scene, poses, clutter, sopt)
		if err != nil {
			return err
		}
		gens <- g
	}
	var mu sync.Mutex
	done := 0
	progress("views", 0, len(out))
	return forEach(ctx, len(out), workers, func(i int) error {
		g := <-gens
		defer func() { gens <- g }()
		sc, err := g.Scene(i)
		if err != nil {
			return err
		}
		if err := pc.view(sc, sopt, &out[i]); err != nil {
			return fmt.Errorf("validate: check view %d: %w", i, err)
		}
		out[i].Unscanned = pc.unscannedShare(sc)
		mu.Lock()
		done++
		progress("views", done, len(out))
		mu.Unlock()
		return nil
	})
}

// forEach runs f(0) … f(n−1) on up to workers goroutines and returns
// the first error (by index order among those that failed) or ctx's
// error.
func forEach(ctx context.Context, n, workers int, f func(i int) error) error {
	errs := make([]error, n)
	var next int
	var mu sync.Mutex
	var wg sync.WaitGroup
	for w := 0; w < max(1, min(workers, n)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				if ctx.Err() != nil {
					return
				}
				mu.Lock()
				i := next
				next++
				mu.Unlock()
				if i >= n {
					return
				}
				errs[i] = f(i)
			}
		}()
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return err
	}
	for _, e := range errs {
		if e != nil {
			return e
		}
	}
	return nil
}

// planeMask marks the pixels with a depth whose point lies more than
// margin above the plane {x : up·x + d = 0}; a zero up marks every
// pixel with a depth.
func planeMask(depth []float32, intr mesh.Intrinsics, up r3.Vec, d, margin float64) []bool {
	mask := make([]bool, len(depth))
	w := intr.Width
	for k, z := range depth {
		if !(z > 0) {
			continue
		}
		if up == (r3.Vec{}) {
			mask[k] = true
			continue
		}
		p := intr.BackProject(float64(k%w), float64(k/w), float64(z))
		mask[k] = r3.Dot(up, p)+d > margin
	}
	return mask
}

// maskedClouds returns the clouds at spacing and spacing/4 of the
// masked pixels.
func maskedClouds(depth []float32, intr mesh.Intrinsics, mask []bool, spacing float64) (scene, dense *mesh.Cloud, err error) {
	opt := mesh.DefaultDepthCloudOptions()
	opt.Spacing = spacing
	if scene, err = mesh.DepthCloud(depth, intr, nil, mask, opt); err != nil {
		return nil, nil, err
	}
	opt.Spacing = spacing / 4
	if dense, err = mesh.DepthCloud(depth, intr, nil, mask, opt); err != nil {
		return nil, nil, err
	}
	return scene, dense, nil
}

// segmentMasks splits the marked pixels into connected pieces: pixels
// joined to the pixels within joinReach of them (so that the one- or
// two-pixel gaps a sensor leaves along depth edges do not cut a part
// in pieces) where the depths differ by less than max(4 mm, 1.5 % of the depth) — a depth step larger than that
// is an occluding edge between objects: the neighbours of a surface
// slanted at 80° differ by about z·tan 80°/f ≈ 1.1 % of z at f = 525 px
// (pinhole geometry), and the axial noise of two neighbours differs by
// about √2·σ_z ≈ 2.5 mm at 0.8 m (Nguyen et al. 2012). Pieces of fewer than minPixels are
// dropped as specks; the rest are returned largest first (ties by their
// first pixel), each as a mask.
func segmentMasks(depth []float32, intr mesh.Intrinsics, mask []bool, minPixels int) [][]bool {
	w, h := intr.Width, intr.Height
	label := make([]int32, len(depth))
	for i := range label {
		label[i] = -1
	}
	type piece struct {
		first, n int
		label    int32
	}
	var pieces []piece
	stack := make([]int, 0, 1024)
	join := func(a, b int) bool {
		za, zb := float64(depth[a]), float64(depth[b])
		return math.Abs(za-zb) < math.Max(0.004, 0.015*math.Min(za, zb))
	}
	for k := range depth {
		if !mask[k] || label[k] >= 0 {
			continue
		}
		id := int32(len(pieces))
		label[k] = id
		stack = append(stack[:0], k)
		n := 0
		for len(stack) > 0 {
			p := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			n++
			x, y := p%w, p/w
			for dy := -joinReach; dy <= joinReach; dy++ {
				for dx := -joinReach; dx <= joinReach; dx++ {
					xx, yy := x+dx, y+dy
					if (dx == 0 && dy == 0) || xx < 0 || yy < 0 || xx >= w || yy >= h {
						continue
					}
					q := yy*w + xx
					if mask[q] && label[q] < 0 && join(p, q) {
						label[q] = id
						stack = append(stack, q)
					}
				}
			}
		}
		pieces = append(pieces, piece{first: k, n: n, label: id})
	}
	sort.SliceStable(pieces, func(i, j int) bool { return pieces[i].n > pieces[j].n })
	var out [][]bool
	for _, pc := range pieces {
		if pc.n < minPixels {
			break
		}
		m := make([]bool, len(depth))
		for k, l := range label {
			if l == pc.label {
				m[k] = true
			}
		}
		out = append(out, m)
	}
	return out
}

// voteScene finds the part's hypotheses in a depth image: the pixels
// above the table (the plane up·x + d = 0, camera frame; zero up: every
// pixel) are split into connected pieces (segmentMasks), as a cell does
// once the bin floor is removed (Euclidean clustering: common practice),
// and each piece that could hold the part (no more than
// MaxSegmentDiameters of its diameter across) is voted on separately
// (features.Vote with SegmentHypotheses hypotheses, refined on the
// piece's dense cloud). The hypotheses of all pieces are returned,
// most votes first.
func (pc *partCheck) voteScene(depth []float32, intr mesh.Intrinsics, up r3.Vec, d float64) ([]features.Hypothesis, error) {
	return pc.voteMasked(depth, intr, planeMask(depth, intr, up, d, pc.opt.PlaneMargin))
}

// voteMasked is voteScene on the marked pixels.
func (pc *partCheck) voteMasked(depth []float32, intr mesh.Intrinsics, mask []bool) ([]features.Hypothesis, error) {
	var all []features.Hypothesis
	for _, seg := range segmentMasks(depth, intr, mask, pc.opt.MinSegmentPixels) {
		scene, dense, err := maskedClouds(depth, intr, seg, pc.tables.Spacing)
		if err != nil {
			return nil, err
		}
		if len(scene.Points) < minSegmentPoints {
			continue
		}
		if b := scene.Bounds(); b.Diagonal() > pc.opt.MaxSegmentDiameters*pc.tables.Diameter {
			continue
		}
		vo := pc.opt.Vote
		// A small piece gets more of its points as references, at least
		// minReferences, so a part seen small or far still collects the
		// votes of enough reference points.
		vo.ReferenceStep = max(1, min(vo.ReferenceStep, len(scene.Points)/minReferences))
		vo.MaxHypotheses = pc.opt.SegmentHypotheses
		vo.Refine = false
		vo.Workers = 1
		hyps, err := features.Vote(pc.tables, scene, vo)
		if err != nil {
			return nil, err
		}
		pc.refineHypotheses(hyps, dense)
		all = append(all, hyps...)
	}
	sort.SliceStable(all, func(i, j int) bool { return all[i].Votes > all[j].Votes })
	// A shape symmetry the colours break: the votes (geometry only)
	// cannot tell the equivalent poses apart, so each hypothesis is
	// joined by its equivalents h·S, as well refined as h itself, and
	// the scorers decide.
	if len(pc.expand) > 0 {
		n := len(all)
		for i := 0; i < n; i++ {
			for _, sym := range pc.expand {
				h := all[i]
				h.ModelToScene = h.ModelToScene.Mul(sym)
				all = append(all, h)
			}
		}
	}
	return all, nil
}

// joinReach is how far (pixels, along each axis) segmentMasks looks
// for neighbours.
const joinReach = 2

// refineHypotheses refines each voted pose by point-to-plane ICP
// (mesh.ICPPointToPlane: Chen & Medioni 1992 with the linearisation of
// Low 2004) of the model points that face the camera under it (their
// normal within 85° of the line of sight, as the scorers count them:
// the far side of the part has nothing to pair with) against the
// piece's dense cloud: first with pairs within a tenth of the diameter
// and 45° of normal agreement, then with pairs within half a model
// spacing and 20°, which drops the pairs across creases where a depth
// image's normals bend (the two stages of the features package's own
// refinement). A hypothesis whose ICP fails (too few pairs) keeps its
// voted pose.
func (pc *partCheck) refineHypotheses(hyps []features.Hypothesis, dense *mesh.Cloud) {
	if len(hyps) == 0 || len(dense.Points) < 6 {
		return
	}
	tree := mesh.NewKDTree(dense.Points)
	src := pc.refine
	sub := &mesh.Cloud{}
	coarse := mesh.DefaultICPOptions()
	coarse.MaxDistance = 0.1 * pc.tables.Diameter
	coarse.HuberDelta = pc.tables.Spacing
	coarse.MaxIterations = pc.opt.RefineIterations
	// Stop once a step moves less than 0.006° and 10 µm: a thousandth
	// of what decides a pose's correctness (10 % of a diameter of
	// centimetres), where the default stops (1e−6 rad, 0.1 µm) aim at
	// alignment precision and run most hypotheses to the limit.
	coarse.StopRotation, coarse.StopTranslation = 1e-4, 1e-5
	fine := coarse
	fine.MaxDistance = 0.5 * pc.tables.Spacing
	fine.MaxNormalAngle = 20 * math.Pi / 180
	for i := range hyps {
		pose := hyps[i].ModelToScene
		sub.Points, sub.Normals = sub.Points[:0], sub.Normals[:0]
		for k, p := range src.Points {
			q := pose.Apply(p)
			if q.Z > 0 && -r3.Dot(pose.Rotate(src.Normals[k]), q)/r3.Norm(q) >= minFacing {
				sub.Points = append(sub.Points, p)
				sub.Normals = append(sub.Normals, src.Normals[k])
			}
		}
		if len(sub.Points) < 6 {
			continue
		}
		res, err := mesh.ICPPointToPlane(sub, dense, tree, pose, coarse)
		if err != nil {
			continue
		}
		if r2, err := mesh.ICPPointToPlane(sub, dense, tree, res.Pose, fine); err == nil {
			res = r2
		}
		hyps[i].ModelToScene = res.Pose
		hyps[i].Refined = true
		hyps[i].ICP = res
	}
}

// minSegmentPoints: a piece with fewer scene points (at the model's
// spacing) than this cannot carry a pose: PPF needs pairs from at least
// two surfaces, a few points each.
const minSegmentPoints = 10

// maxExpand bounds the shape symmetries a hypothesis is expanded by
// (voteScene): a finite group up to the octahedral's 24 elements.
const maxExpand = 24

// minReferences is the fewest reference points a piece is voted with
// (while it has that many points): Drost et al. (2010) take every fifth
// scene point, which on a piece of a hundred points would leave twenty.
// On 16 check views each of the valve, bracket and labelbox, 50 found
// the part as often as 100, with voting and refinement at 72–83 % of
// the CPU time.
const minReferences = 50

// view processes one rendered scene into out.
func (pc *partCheck) view(sc *Scene, sopt SceneOptions, out *ViewResult) error {
	intr := sc.Frame.Intr
	*out = ViewResult{Index: sc.Index, Truth: sc.ModelToCam, StablePose: sc.StablePose,
		VisibleFraction: sc.VisibleFraction, Clutter: len(sc.Clutter), intr: intr,
		BestBaseline: -1, BestPoint: -1, BestVotes: -1}
	// The table in the camera frame: world z = 0, up +z.
	up, d := tableInCamera(sc)
	hyps, err := pc.voteScene(sc.Frame.Depth, intr, up, d)
	if err != nil {
		return err
	}
	poses := make([]mesh.Pose, 0, len(hyps)+pc.opt.ExtraWrong)
	for _, h := range hyps {
		poses = append(poses, h.ModelToScene)
		out.Hypotheses = append(out.Hypotheses, HypothesisResult{ModelToCam: h.ModelToScene, Votes: h.Votes})
	}
	if pc.opt.ExtraWrong > 0 {
		rng := rand.New(rand.NewPCG(pc.opt.Seed^0xe47a, uint64(sc.Index)))
		// PerturbedHypotheses makes every third one near the truth;
		// take the far ones only.
		for _, p := range PerturbedHypotheses(sc.ModelToCam, pc.centre, pc.errs.Diameter(), 3*pc.opt.ExtraWrong, rng) {
			if len(poses)-len(hyps) == pc.opt.ExtraWrong {
				break
			}
			if pc.errs.Correct(sc.ModelToCam, p, pc.symmetric) {
				continue
			}
			poses = append(poses, p)
			out.Hypotheses = append(out.Hypotheses, HypothesisResult{ModelToCam: p, Extra: true})
		}
	}
	obs, err := ObservationFromFrame(sc.Frame)
	if err != nil {
		return err
	}
	for k := range out.Hypotheses {
		h := &out.Hypotheses[k]
		h.ADD = pc.errs.ADD(sc.ModelToCam, h.ModelToCam)
		lim := CorrectFraction * pc.errs.Diameter()
		h.Correct = h.ADD < lim || (pc.symmetric && addsBelow(pc.errs, sc.ModelToCam, h.ModelToCam, lim))
		h.Baseline = BaselineScore(pc.score, h.ModelToCam, obs, pc.opt.Baseline).Score
	}
	out.obs = cropObservation(obs, pc.score, poses)
	out.thumb = thumbnail(sc.Frame.Color, 320)
	return nil
}

// addsBelow reports whether m.ADDS(truth, est) < limit, stopping as
// soon as the running sum of nearest distances shows that the mean
// cannot end below limit (most wrong hypotheses are decided after a
// few of the points). The points are visited in the same order and the
// sum formed the same way as in ADDS, so when the loop runs to the end
// the result is ADDS < limit (up to the rounding of the comparison: sum < limit·n against sum/n < limit).
func addsBelow(m *ErrorModel, truth, est mesh.Pose, limit float64) bool {
	back := est.Inv().Mul(truth)
	budget := limit * float64(len(m.points))
	var sum float64
	for _, x := range m.points {
		_, d2 := m.tree.Nearest(back.Apply(x))
		sum += math.Sqrt(d2)
		if sum >= budget {
			return false
		}
	}
	return sum/float64(len(m.points)) < limit
}

// cropObservation returns obs cut to the bounding box (plus a pixel) of
// the projections of the model's points under every pose: the scorers
// then read exactly the same pixels as on the whole image (pixel
// coordinates shift by the crop's corner, which is an integer), at a
// fraction of the memory.
func cropObservation(obs *Observation, m *ScoreModel, poses []mesh.Pose) *Observation {
	k := obs.Intr
	x0, y0, x1, y1 := k.Width, k.Height, -1, -1
	for _, p := range poses {
		for _, q := range m.Points {
			c := p.Apply(q)
			if !(c.Z > 0) {
				continue
			}
			x := math.Floor(k.Fx*c.X/c.Z + k.Cx + 0.5)
			y := math.Floor(k.Fy*c.Y/c.Z + k.Cy + 0.5)
			x0 = min(x0, int(math.Max(-1, math.Min(float64(k.Width), x))))
			x1 = max(x1, int(math.Max(-1, math.Min(float64(k.Width), x))))
			y0 = min(y0, int(math.Max(-1, math.Min(float64(k.Height), y))))
			y1 = max(y1, int(math.Max(-1, math.Min(float64(k.Height), y))))
		}
	}
	x0, y0 = max(0, x0-1), max(0, y0-1)
	x1, y1 = min(k.Width-1, x1+1), min(k.Height-1, y1+1)
	if x1 < x0 || y1 < y0 {
		x0, y0, x1, y1 = 0, 0, 0, 0
	}
	w, h := x1-x0+1, y1-y0+1
	out := &Observation{Intr: mesh.Intrinsics{Width: w, Height: h, Fx: k.Fx, Fy: k.Fy, Cx: k.Cx - float64(x0), Cy: k.Cy - float64(y0)}}
	out.Depth = make([]float32, w*h)
	if obs.Normal != nil {
		out.Normal = make([]float32, 3*w*h)
	}
	if obs.HSV != nil {
		out.HSV = make([]HSV, w*h)
	}
	for y := 0; y < h; y++ {
		src := (y+y0)*k.Width + x0
		copy(out.Depth[y*w:(y+1)*w], obs.Depth[src:src+w])
		if obs.Normal != nil {
			copy(out.Normal[3*y*w:3*(y+1)*w], obs.Normal[3*src:3*(src+w)])
		}
		if obs.HSV != nil {
			copy(out.HSV[y*w:(y+1)*w], obs.HSV[src:src+w])
		}
	}
	return out
}

// thumbnail returns img scaled to width w (box filter), keeping its
// aspect ratio; nil for nil.
func thumbnail(img *image.NRGBA, w int) *image.NRGBA {
	if img == nil {
		return nil
	}
	sw, sh := img.Rect.Dx(), img.Rect.Dy()
	if sw <= w {
		return img
	}
	h := max(1, sh*w/sw)
	out := image.NewNRGBA(image.Rect(0, 0, w, h))
	for y := 0; y < h; y++ {
		ya, yb := y*sh/h, max((y+1)*sh/h, y*sh/h+1)
		for x := 0; x < w; x++ {
			xa, xb := x*sw/w, max((x+1)*sw/w, x*sw/w+1)
			var s [4]int
			n := 0
			for yy := ya; yy < yb; yy++ {
				row := img.Pix[(yy)*img.Stride:]
				for xx := xa; xx < xb; xx++ {
					for c := 0; c < 4; c++ {
						s[c] += int(row[4*xx+c])
					}
					n++
				}
			}
			o := out.PixOffset(x, y)
			for c := 0; c < 4; c++ {
				out.Pix[o+c] = uint8(s[c] / n)
			}
		}
	}
	return out
}

// calibrate fits the point score's weights (all views, and each half
// for the other) and scores every hypothesis with them.
func (pc *partCheck) calibrate(res *CheckResult, workers int) error {
	// The calibration set: per view the perturbed hypotheses, and of
	// the voted ones (in order of votes) up to CalibrationRight right
	// and CalibrationWrong wrong ones — the strongest contenders; the
	// rest add scoring time and say little more.
	var set []Labelled
	var groups [3][]int // all, even views, odd views
	for i := range res.Views {
		v := &res.Views[i]
		nr, nw := 0, 0
		for _, h := range v.Hypotheses {
			switch {
			case h.Extra:
			case h.Correct && nr < pc.opt.CalibrationRight:
				nr++
			case !h.Correct && nw < pc.opt.CalibrationWrong:
				nw++
			default:
				continue
			}
			groups[0] = append(groups[0], len(set))
			groups[1+v.Index%2] = append(groups[1+v.Index%2], len(set))
			set = append(set, Labelled{Obs: v.obs, ModelToCam: h.ModelToCam, Right: h.Correct})
		}
	}
	fitted, errs := calibrateWeightsGroups(pc.score, set, groups[:], pc.opt.Point, pc.opt.Grid, workers)
	pc.calibrated = fitted[0]
	pc.heldOut = [2]PointScoreOptions{fitted[1], fitted[2]}
	res.PointOptions = fitted[0]
	switch {
	case errs[0] != nil:
		res.WeightsNote = "the point score's weights could not be calibrated (" + errs[0].Error() + "); the defaults were used"
	case errs[1] != nil || errs[2] != nil:
		res.WeightsNote = "the weights were calibrated on all views; one half of the views lacked right or wrong hypotheses, so its held-out recall uses the defaults"
	default:
		res.WeightsNote = "weights calibrated on all views for the cell; the recall uses, for each view, the weights calibrated on the other half of the views"
	}
	forEach(context.Background(), len(res.Views), workers, func(i int) error {
		v := &res.Views[i]
		other := pc.heldOut[1-v.Index%2]
		for k := range v.Hypotheses {
			h := &v.Hypotheses[k]
			h.Point = PointScore(pc.score, h.ModelToCam, v.obs, pc.calibrated).Score
			h.PointHeldOut = PointScore(pc.score, h.ModelToCam, v.obs, other).Score
		}
		return nil
	})
	return nil
}

// calibrateWeightsGroups is CalibrateWeights run on each group of the
// labelled set (indices into set), scoring every item once per weight
// combination and sharing the scores between the groups; combinations
// are scored in parallel. A group lacking right or wrong items gets the
// base options and an error, as CalibrateWeights gives.
func calibrateWeightsGroups(m *ScoreModel, set []Labelled, groups [][]int, base PointScoreOptions, grid WeightGrid, workers int) ([]PointScoreOptions, []error) {
	fitted := make([]PointScoreOptions, len(groups))
	errs := make([]error, len(groups))
	for g, idx := range groups {
		fitted[g] = base
		nr := 0
		for _, i := range idx {
			if set[i].Right {
				nr++
			}
		}
		if nr == 0 || nr == len(idx) {
			errs[g] = fmt.Errorf("validate: weight calibration needs right and wrong hypotheses (%d right of %d)", nr, len(idx))
		}
	}
	combos, err := grid.combinations(base)
	if err != nil {
		for g := range errs {
			errs[g] = err
		}
		return fitted, errs
	}
	scores := make([][]float64, len(combos))
	forEach(context.Background(), len(combos), workers, func(c int) error {
		sc := make([]float64, len(set))
		for i, l := range set {
			sc[i] = PointScore(m, l.ModelToCam, l.Obs, combos[c]).Score
		}
		scores[c] = sc
		return nil
	})
	for g, idx := range groups {
		if errs[g] != nil {
			continue
		}
		best := Separation{AUC: math.Inf(-1), Gap: math.Inf(-1)}
		var right, wrong []float64
		for c := range combos {
			right, wrong = right[:0], wrong[:0]
			for _, i := range idx {
				if set[i].Right {
					right = append(right, scores[c][i])
				} else {
					wrong = append(wrong, scores[c][i])
				}
			}
			if sep := Separate(right, wrong); sep.better(best) {
				best, fitted[g] = sep, combos[c]
			}
		}
	}
	return fitted, errs
}

// figures picks each ranking's hypothesis per view and gathers the
// recalls and calibrations.
func (pc *partCheck) figures(res *CheckResult) {
	d := pc.errs.Diameter()
	lim := CorrectFraction * d
	best := func(v *ViewResult, key func(h *HypothesisResult) float64) int {
		b := -1
		for k := range v.Hypotheses {
			h := &v.Hypotheses[k]
			if h.Extra {
				continue
			}
			// Ties go to the earlier hypothesis (more votes).
			if b < 0 || key(h) > key(&v.Hypotheses[b]) {
				b = k
			}
		}
		return b
	}
	oracle := 0
	var mssd [3][]float64
	var right, wrong [2][]float64
	for i := range res.Views {
		v := &res.Views[i]
		v.BestBaseline = best(v, func(h *HypothesisResult) float64 { return h.Baseline })
		v.BestPoint = best(v, func(h *HypothesisResult) float64 { return h.PointHeldOut })
		v.BestVotes = best(v, func(h *HypothesisResult) float64 { return h.Votes })
		any := false
		for _, h := range v.Hypotheses {
			if !h.Extra && h.Correct {
				any = true
			}
			if h.Correct {
				right[0] = append(right[0], h.Baseline)
				right[1] = append(right[1], h.Point)
			} else {
				wrong[0] = append(wrong[0], h.Baseline)
				wrong[1] = append(wrong[1], h.Point)
			}
		}
		if any {
			oracle++
		}
		for k, b := range [3]int{v.BestBaseline, v.BestPoint, v.BestVotes} {
			v.MSSD[k] = math.Inf(1)
			if b < 0 {
				continue
			}
			est := v.Hypotheses[b].ModelToCam
			v.MSSD[k] = pc.errs.MSSD(v.Truth, est)
			for _, sy := range pc.errs.Symmetries() {
				if pc.errs.ADD(v.Truth.Mul(sy), est) < lim {
					v.ColorCorrect[k] = true
					break
				}
			}
			mssd[k] = append(mssd[k], v.MSSD[k])
		}
		for k := range mssd {
			if len(mssd[k]) < i+1 {
				mssd[k] = append(mssd[k], math.Inf(1))
			}
		}
	}
	n := float64(len(res.Views))
	res.Oracle = float64(oracle) / n
	fig := func(name string, k int) ScorerFigures {
		f := ScorerFigures{Name: name}
		var c, cc int
		for i := range res.Views {
			if res.Views[i].Chose(k) {
				c++
			}
			if res.Views[i].ColorCorrect[k] {
				cc++
			}
		}
		f.Recall, f.ColorRecall = float64(c)/n, float64(cc)/n
		var sc, sn, ec, en int
		for i := range res.Views {
			v := &res.Views[i]
			if v.Unscanned <= maxUnscanned {
				sn++
				if v.Chose(k) {
					sc++
				}
			} else {
				en++
				if v.Chose(k) {
					ec++
				}
			}
		}
		f.Scanned = sn
		if sn > 0 {
			f.ScannedRecall = float64(sc) / float64(sn)
		}
		if en > 0 {
			f.ExposedRecall = float64(ec) / float64(en)
		}
		f.MSSDRecall = AverageRecall(mssd[k], MSSDThresholds(d))
		if k < 2 {
			f.Right, f.Wrong = right[k], wrong[k]
			if cal, err := Calibrate(right[k], wrong[k], pc.opt.Calibration); err == nil {
				f.Calibration = cal
				acc, sacc := 0, 0
				for i := range res.Views {
					v := &res.Views[i]
					b := [2]int{v.BestBaseline, v.BestPoint}[k]
					if b < 0 || !v.Hypotheses[b].Correct {
						continue
					}
					if sc := [2]float64{v.Hypotheses[b].Baseline, v.Hypotheses[b].Point}[k]; sc >= cal.Threshold {
						acc++
						if v.Unscanned <= maxUnscanned {
							sacc++
						}
					}
				}
				f.AcceptedRecall = float64(acc) / n
				if sn > 0 {
					f.ScannedAcceptedRecall = float64(sacc) / float64(sn)
				}
			}
		}
		return f
	}
	res.Baseline = fig(ScorerBaseline, 0)
	res.Point = fig(ScorerPoint, 1)
	res.Votes = fig(ScorerVotes, 2)
}

// The scorers' names in reports.
const (
	ScorerBaseline = "inlier count (baseline)"
	ScorerPoint    = "point difference"
	ScorerVotes    = "PPF votes"
)
