package validate

import (
	"context"
	"fmt"
	"image"
	"math"
	"math/rand/v2"
	"sort"
	"sync"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// RealFrame is one real RGB-D frame of the part with the pose at which
// it stood: typically a frame of the sweep the model was fused from,
// with the pose the fusion found (ModelToCam = CamToWorld⁻¹ ·
// ModelToWorld). The caller loads it (package reconstruct); validate
// does not read sweeps.
type RealFrame struct {
	// Index names the frame (its number in the sweep).
	Index int
	// Intr is the camera; Depth holds Width·Height depths in metres
	// along the optical axis (0 = none) and Color the registered colour
	// image (nil: no colour).
	Intr  mesh.Intrinsics
	Depth []float32
	Color *image.NRGBA
	// ModelToCam is the reference pose of the model in this frame.
	ModelToCam mesh.Pose
}

// RealFrameFigures is what one real frame showed.
type RealFrameFigures struct {
	// Index is the frame's Index; Hypotheses the number voted.
	Index      int `json:"index"`
	Hypotheses int `json:"hypotheses"`
	// Found: the point scorer's best hypothesis lies where the part
	// stood (ADD, or ADD-S for a symmetric part, < 10 % of the
	// diameter); Accepted: and scores at or above the part's threshold.
	// Error is that hypothesis's ADD (ADD-S) error, metres (+Inf
	// without one).
	Found    bool    `json:"found"`
	Accepted bool    `json:"accepted"`
	Error    float64 `json:"error_m"`
	// Score is the best hypothesis's point score; ReferenceScore and
	// ReferenceInliers the point score and inlier share at the reference
	// pose.
	Score            float64 `json:"score"`
	ReferenceScore   float64 `json:"reference_score"`
	ReferenceInliers float64 `json:"reference_inliers"`
	// ColorPoints counts the model points compared in colour at the
	// reference pose (visible and at the observed depth), and
	// ColorMismatch the share of them whose colour differs.
	ColorPoints   int     `json:"color_points"`
	ColorMismatch float64 `json:"color_mismatch"`
	// PlaneRemoved reports that a dominant plane (the support, a wall)
	// was found and removed before voting.
	PlaneRemoved bool `json:"plane_removed"`
}

// RealFrameResult is the real-frame check.
type RealFrameResult struct {
	Frames []RealFrameFigures `json:"frames"`
	// Recall is the share of frames in which the part was found,
	// AcceptedShare the share in which it was also accepted.
	Recall        float64 `json:"recall"`
	AcceptedShare float64 `json:"accepted_share"`
	// MeanReferenceScore and MeanReferenceInliers average the scores at
	// the reference poses: how well the model explains the real part.
	MeanReferenceScore   float64 `json:"mean_reference_score"`
	MeanReferenceInliers float64 `json:"mean_reference_inliers"`
	// ColorChecked counts the points compared in colour over all frames
	// and ColorMismatch the share that differ (ColorDistance above
	// realColorThreshold).
	ColorChecked  int     `json:"color_checked"`
	ColorMismatch float64 `json:"color_mismatch"`
}

// realColorThreshold is the ColorDistance above which a model point's
// colour differs from the frame's: the threshold the symmetry detector
// uses for the same question (SymmetryOptions.ColorThreshold).
const realColorThreshold = 0.2

// pickFrames returns up to n frames evenly spread over frames (all when
// n ≥ len or n = 0).
func pickFrames(frames []RealFrame, n int) []RealFrame {
	if n <= 0 || n >= len(frames) {
		return frames
	}
	out := make([]RealFrame, n)
	for i := range out {
		out[i] = frames[i*len(frames)/n]
	}
	return out
}

// realFrames scores the model against real frames with the calibrated
// point scorer.
func (pc *partCheck) realFrames(ctx context.Context, frames []RealFrame, res *CheckResult, opt CheckOptions, workers int,
	progress func(string, int, int)) (*RealFrameResult, error) {
	frames = pickFrames(frames, opt.MaxRealFrames)
	for i, f := range frames {
		if err := f.Intr.Validate(); err != nil {
			return nil, fmt.Errorf("validate: real frame %d: %w", f.Index, err)
		}
		if len(f.Depth) != f.Intr.Width*f.Intr.Height {
			return nil, fmt.Errorf("validate: real frame %d has %d depths, want %d×%d", f.Index, len(f.Depth), f.Intr.Width, f.Intr.Height)
		}
		if err := checkPose(f.ModelToCam); err != nil {
			return nil, fmt.Errorf("validate: real frame %d reference pose: %w", f.Index, err)
		}
		_ = i
	}
	threshold := math.Inf(1)
	if c := res.Point.Calibration; c != nil {
		threshold = c.Threshold
	}
	out := &RealFrameResult{Frames: make([]RealFrameFigures, len(frames))}
	mismatched := make([]int, len(frames))
	var mu sync.Mutex
	done := 0
	progress("real frames", 0, len(frames))
	err := forEach(ctx, len(frames), workers, func(i int) error {
		f := frames[i]
		fig, bad, err := pc.realFrame(f, threshold, opt)
		if err != nil {
			return fmt.Errorf("validate: real frame %d: %w", f.Index, err)
		}
		out.Frames[i], mismatched[i] = fig, bad
		mu.Lock()
		done++
		progress("real frames", done, len(frames))
		mu.Unlock()
		return nil
	})
	if err != nil {
		return nil, err
	}
	var found, acc, bad int
	for i, f := range out.Frames {
		if f.Found {
			found++
		}
		if f.Accepted {
			acc++
		}
		out.MeanReferenceScore += f.ReferenceScore
		out.MeanReferenceInliers += f.ReferenceInliers
		out.ColorChecked += f.ColorPoints
		bad += mismatched[i]
	}
	n := float64(len(out.Frames))
	out.Recall, out.AcceptedShare = float64(found)/n, float64(acc)/n
	out.MeanReferenceScore /= n
	out.MeanReferenceInliers /= n
	if out.ColorChecked > 0 {
		out.ColorMismatch = float64(bad) / float64(out.ColorChecked)
	}
	return out, nil
}

// realFrame checks one frame; it returns the figures and the number of
// colour-mismatched points.
func (pc *partCheck) realFrame(f RealFrame, threshold float64, opt CheckOptions) (RealFrameFigures, int, error) {
	fig := RealFrameFigures{Index: f.Index, Error: math.Inf(1)}
	obs, err := NewObservation(f.Depth, f.Color, f.Intr)
	if err != nil {
		return fig, 0, err
	}
	up, d, ok, err := dominantPlane(f.Depth, f.Intr, pc.tables.Spacing, opt.PlaneMargin, opt.Seed^uint64(f.Index))
	if err != nil {
		return fig, 0, err
	}
	fig.PlaneRemoved = ok
	hyps, err := pc.voteScene(f.Depth, f.Intr, up, d)
	if err != nil {
		return fig, 0, err
	}
	fig.Hypotheses = len(hyps)
	best := -1
	for k, h := range hyps {
		s := PointScore(pc.score, h.ModelToScene, obs, pc.calibrated).Score
		if best < 0 || s > fig.Score {
			best, fig.Score = k, s
		}
	}
	if best >= 0 {
		est := hyps[best].ModelToScene
		if pc.symmetric {
			fig.Error = pc.errs.ADDS(f.ModelToCam, est)
		} else {
			fig.Error = pc.errs.ADD(f.ModelToCam, est)
		}
		fig.Found = pc.errs.Correct(f.ModelToCam, est, pc.symmetric)
		fig.Accepted = fig.Found && fig.Score >= threshold
	}
	fig.ReferenceScore = PointScore(pc.score, f.ModelToCam, obs, pc.calibrated).Score
	fig.ReferenceInliers = BaselineScore(pc.score, f.ModelToCam, obs, opt.Baseline).Score
	bad := 0
	if obs.HSV != nil && pc.score.HSV != nil {
		fig.ColorPoints, bad = colorAgreement(pc.score, f.ModelToCam, obs, pc.calibrated)
		if fig.ColorPoints > 0 {
			fig.ColorMismatch = float64(bad) / float64(fig.ColorPoints)
		}
	}
	return fig, bad, nil
}

// colorAgreement compares the colours of the model points that face the
// camera, project inside the image and lie at the observed depth
// (within the point score's depth scale) with the observed colours:
// it returns how many were compared and how many differ by more than
// realColorThreshold.
func colorAgreement(m *ScoreModel, modelToCam mesh.Pose, obs *Observation, opt PointScoreOptions) (checked, differ int) {
	k := obs.Intr
	for i, p := range m.Points {
		pc := modelToCam.Apply(p)
		if !(pc.Z > 0) {
			continue
		}
		nc := modelToCam.Rotate(m.Normals[i])
		cosT := -r3.Dot(nc, pc) / r3.Norm(pc)
		if cosT < 0.5 { // within 60° of facing: colour at grazing angles is mostly shading
			continue
		}
		x := int(math.Floor(k.Fx*pc.X/pc.Z + k.Cx + 0.5))
		y := int(math.Floor(k.Fy*pc.Y/pc.Z + k.Cy + 0.5))
		if x < 0 || y < 0 || x >= k.Width || y >= k.Height {
			continue
		}
		pix := y*k.Width + x
		zo := float64(obs.Depth[pix])
		if !(zo > 0) || math.Abs(zo-pc.Z) > axialTolerance(pc.Z, cosT, opt.DepthSigmas, opt.MinDepthTolerance) {
			continue
		}
		checked++
		if ColorDistance(obs.HSV[pix], m.HSV[i], opt.Color) > realColorThreshold {
			differ++
		}
	}
	return checked, differ
}

// dominantPlane finds the largest plane in a depth image by RANSAC
// (Fischler & Bolles 1981, CACM 24(6), DOI 10.1145/358669.358692) on
// the points thinned to spacing: planes through three random points,
// the one with the most points within margin wins if it holds at least
// a quarter of them, refitted by least squares on its inliers (the
// smallest principal axis of their covariance). The plane is returned
// as (up, d) with up·x + d = 0, up pointing toward the camera. 200
// iterations find a plane holding a quarter of the points with
// probability 1 − (1 − 0.25³)²⁰⁰ > 0.95 (the RANSAC bound).
func dominantPlane(depth []float32, intr mesh.Intrinsics, spacing, margin float64, seed uint64) (r3.Vec, float64, bool, error) {
	o := mesh.DefaultDepthCloudOptions()
	o.Spacing = spacing
	c, err := mesh.DepthCloud(depth, intr, nil, nil, o)
	if err != nil {
		return r3.Vec{}, 0, false, err
	}
	pts := c.Points
	if len(pts) < 30 || !(margin > 0) {
		return r3.Vec{}, 0, false, nil
	}
	rng := rand.New(rand.NewPCG(seed, 0x91a4e))
	bestN := 0
	var bestUp r3.Vec
	var bestD float64
	for it := 0; it < 200; it++ {
		a, b, cc := pts[rng.IntN(len(pts))], pts[rng.IntN(len(pts))], pts[rng.IntN(len(pts))]
		n := r3.Cross(r3.Sub(b, a), r3.Sub(cc, a))
		if r3.Norm(n) < 1e-12 {
			continue
		}
		n = mesh.Normalize(n)
		d := -r3.Dot(n, a)
		cnt := 0
		for _, p := range pts {
			if math.Abs(r3.Dot(n, p)+d) <= margin {
				cnt++
			}
		}
		if cnt > bestN {
			bestN, bestUp, bestD = cnt, n, d
		}
	}
	if bestN < len(pts)/4 {
		return r3.Vec{}, 0, false, nil
	}
	var in []r3.Vec
	for _, p := range pts {
		if math.Abs(r3.Dot(bestUp, p)+bestD) <= margin {
			in = append(in, p)
		}
	}
	cen := centroidOf(in)
	var cov [3][3]float64
	for _, p := range in {
		q := r3.Sub(p, cen)
		v := [3]float64{q.X, q.Y, q.Z}
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				cov[i][j] += v[i] * v[j]
			}
		}
	}
	up := eigenSym3(cov)[0]
	if r3.Dot(up, cen) > 0 { // the camera (origin) on the positive side
		up = r3.Scale(-1, up)
	}
	return up, -r3.Dot(up, cen), true, nil
}

// median returns the median of x (NaN when empty).
func median(x []float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), x...)
	sort.Float64s(s)
	return percentileSorted(s, 0.5)
}
