package validate

import (
	"context"
	"encoding/json"
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
	// PlanesRemoved counts the large planes (the support, a turntable's
	// plate, a wall) found and removed before voting (scenePlanes).
	PlanesRemoved int `json:"planes_removed"`
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
func (pc *partCheck) realFrames(ctx context.Context, frames []RealFrame, supportZ float64, res *CheckResult, opt CheckOptions, workers int,
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
		fig, bad, err := pc.realFrame(f, supportZ, threshold, opt)
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
// colour-mismatched points. The large planes of the frame are removed
// before voting (scenePlanes), and the support the part stood on too
// when its height supportZ is known (not NaN).
func (pc *partCheck) realFrame(f RealFrame, supportZ, threshold float64, opt CheckOptions) (RealFrameFigures, int, error) {
	fig := RealFrameFigures{Index: f.Index, Error: math.Inf(1)}
	obs, err := NewObservation(f.Depth, f.Color, f.Intr)
	if err != nil {
		return fig, 0, err
	}
	planes, err := scenePlanes(f.Depth, f.Intr, pc.tables.Spacing, opt.PlaneMargin, opt.Seed^uint64(f.Index))
	if err != nil {
		return fig, 0, err
	}
	if !math.IsNaN(supportZ) {
		// The support the part stood on, where the reference pose puts
		// it (part frame z = supportZ), as a cell knows its bin floor.
		up := f.ModelToCam.Rotate(r3.Vec{Z: 1})
		planes = append([]scenePlane{{up: up, d: -r3.Dot(up, f.ModelToCam.Apply(r3.Vec{Z: supportZ}))}}, planes...)
	}
	fig.PlanesRemoved = len(planes)
	hyps, err := pc.voteMasked(f.Depth, f.Intr, planesMask(f.Depth, f.Intr, planes, opt.PlaneMargin))
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
		x, y, in := k.Pixel(pc)
		if !in {
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

// scenePlane is a plane {x : up·x + d = 0} in a camera frame, up
// pointing toward the camera.
type scenePlane struct {
	up r3.Vec
	d  float64
}

// ransacIterations is the number of random planes tried per plane
// found: 400 find a plane holding a tenth of the points with
// probability 1 − (1 − 0.1³)⁴⁰⁰ = 0.33, one holding a quarter with
// 0.998 (the RANSAC bound, Fischler & Bolles 1981).
const ransacIterations = 400

// maxPlanes bounds the planes removed from a real frame: the support
// (a table, a turntable's plate on its table), and a wall behind.
const maxPlanes = 3

// scenePlanes finds the large planes of a depth image by RANSAC
// (Fischler & Bolles 1981, CACM 24(6), DOI 10.1145/358669.358692) on
// the points thinned to spacing, one after the other: planes through
// three random points, the one with the most points within margin wins
// if it holds at least a twentieth of all the points (so that a part's
// own faces, a small share of the view, do not count), and
// is refitted by least squares on its inliers (the smallest principal
// axis of their covariance); its inliers are then set aside and the
// next plane is sought, up to maxPlanes, each from ransacIterations
// random planes. A small plane may be missed; its piece is then voted
// on with the rest.
func scenePlanes(depth []float32, intr mesh.Intrinsics, spacing, margin float64, seed uint64) ([]scenePlane, error) {
	o := mesh.DefaultDepthCloudOptions()
	o.Spacing = spacing
	c, err := mesh.DepthCloud(depth, intr, nil, nil, o)
	if err != nil {
		return nil, err
	}
	pts := c.Points
	if !(margin > 0) {
		return nil, nil
	}
	rng := rand.New(rand.NewPCG(seed, 0x91a4e))
	var out []scenePlane
	total := len(pts)
	for len(out) < maxPlanes && len(pts) >= 30 {
		bestN := 0
		var bestUp r3.Vec
		var bestD float64
		for it := 0; it < ransacIterations; it++ {
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
		if bestN < total/20 || bestN < 3 {
			break
		}
		var in, rest []r3.Vec
		for _, p := range pts {
			if math.Abs(r3.Dot(bestUp, p)+bestD) <= margin {
				in = append(in, p)
			} else {
				rest = append(rest, p)
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
		out = append(out, scenePlane{up: up, d: -r3.Dot(up, cen)})
		pts = rest
	}
	return out, nil
}

// planesMask marks the pixels with a depth whose point lies farther
// than margin from every plane: the planes' own points go, and nothing
// beyond them (cutting away all that lies below a turntable's plate
// would also cut the background's objects into part-sized pieces).
func planesMask(depth []float32, intr mesh.Intrinsics, planes []scenePlane, margin float64) []bool {
	mask := planeMask(depth, intr, r3.Vec{}, 0, margin)
	w := intr.Width
	for k, on := range mask {
		if !on {
			continue
		}
		p := intr.BackProject(float64(k%w), float64(k/w), float64(depth[k]))
		for _, pl := range planes {
			if math.Abs(r3.Dot(pl.up, p)+pl.d) <= margin {
				mask[k] = false
				break
			}
		}
	}
	return mask
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

// MarshalJSON writes the figures with a null error where no hypothesis
// was found (JSON has no infinity).
func (f RealFrameFigures) MarshalJSON() ([]byte, error) {
	type plain RealFrameFigures
	out := struct {
		plain
		Error *float64 `json:"error_m"`
	}{plain: plain(f)}
	if !math.IsInf(f.Error, 0) && !math.IsNaN(f.Error) {
		out.Error = &f.Error
	}
	return json.Marshal(out)
}
