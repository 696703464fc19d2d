package validate

import (
	"errors"
	"fmt"
	"image"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

// Observation is what a scorer compares a hypothesis with: one RGB-D
// frame in the camera frame of Intr.
type Observation struct {
	Intr mesh.Intrinsics
	// Depth is z in metres per pixel, row-major; 0 = no measurement.
	Depth []float32
	// Normal holds a unit surface normal (x, y, z) per pixel facing the
	// camera, estimated from Depth (see NewObservation); zero where
	// unknown. Nil: no normals.
	Normal []float32
	// HSV is the colour per pixel; nil: no colour.
	HSV []HSV
}

// normalStep is the pixel offset of the central differences that
// estimate normals from depth: ±2 pixels average over a 5-pixel span,
// which at 0.5 m and f = 525 px is 5 mm of surface, against axial noise
// of about 1.2 mm (Nguyen et al. 2012), so the normals are usable
// rather than dominated by noise.
const normalStep = 2

// NewObservation builds an observation from a depth image (metres, 0 =
// none) and an optional colour image (nil: no colour) of the camera
// intr. Normals are estimated from the depth alone, as a cell's sensor
// gives them: n ∝ (P(u+k, v) − P(u−k, v)) × (P(u, v+k) − P(u, v−k))
// with P the back-projected points and k = 2, falling back to one-sided
// differences at holes, and left zero where the neighbours differ in
// depth by more than 5 % of z (a depth edge) or are missing.
func NewObservation(depth []float32, color *image.NRGBA, intr mesh.Intrinsics) (*Observation, error) {
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("validate: observation %w", err)
	}
	w, h := intr.Width, intr.Height
	if len(depth) != w*h {
		return nil, fmt.Errorf("validate: observation depth has %d pixels, want %d×%d", len(depth), w, h)
	}
	obs := &Observation{Intr: intr, Depth: depth, Normal: make([]float32, 3*w*h)}
	if color != nil {
		if color.Rect.Dx() != w || color.Rect.Dy() != h {
			return nil, fmt.Errorf("validate: observation colour is %v, depth %d×%d", color.Rect.Size(), w, h)
		}
		obs.HSV = HSVImage(color.Pix, color.Stride, w, h, nil)
	}
	point := func(x, y int) (r3.Vec, bool) {
		if x < 0 || y < 0 || x >= w || y >= h {
			return r3.Vec{}, false
		}
		z := depth[y*w+x]
		if !(z > 0) {
			return r3.Vec{}, false
		}
		return intr.BackProject(float64(x), float64(y), float64(z)), true
	}
	// diff returns P(a) − P(b) along one axis, preferring the central
	// difference, else one-sided, rejecting depth edges.
	diff := func(c r3.Vec, x, y, dx, dy int) (r3.Vec, bool) {
		p, okp := point(x+dx, y+dy)
		m, okm := point(x-dx, y-dy)
		lim := 0.05 * c.Z
		okp = okp && math.Abs(p.Z-c.Z) < lim
		okm = okm && math.Abs(m.Z-c.Z) < lim
		switch {
		case okp && okm:
			return r3.Sub(p, m), true
		case okp:
			return r3.Sub(p, c), true
		case okm:
			return r3.Sub(c, m), true
		}
		return r3.Vec{}, false
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			c, ok := point(x, y)
			if !ok {
				continue
			}
			du, ok1 := diff(c, x, y, normalStep, 0)
			dv, ok2 := diff(c, x, y, 0, normalStep)
			if !ok1 || !ok2 {
				continue
			}
			n := mesh.Normalize(r3.Cross(du, dv))
			if r3.Dot(n, c) > 0 {
				n = r3.Scale(-1, n)
			}
			k := 3 * (y*w + x)
			obs.Normal[k], obs.Normal[k+1], obs.Normal[k+2] = float32(n.X), float32(n.Y), float32(n.Z)
		}
	}
	return obs, nil
}

// ObservationFromFrame returns NewObservation of a rendered frame's
// depth and colour (the frame's ground-truth normals are not used).
func ObservationFromFrame(f *render.Frame) (*Observation, error) {
	if f == nil {
		return nil, errors.New("validate: nil frame")
	}
	return NewObservation(f.Depth, f.Color, f.Intr)
}

// ScoreModel is the part as the scorers see it: oriented points with
// optional colours, in the part frame.
type ScoreModel struct {
	Points  []r3.Vec
	Normals []r3.Vec
	HSV     []HSV // nil: no colour
}

// NewScoreModel returns the scoring model of an oriented cloud (the
// part's evenly sampled model cloud, about a thousand points). The cloud
// must have unit normals; colours are optional.
func NewScoreModel(c *mesh.Cloud) (*ScoreModel, error) {
	if err := c.Validate(); err != nil {
		return nil, fmt.Errorf("validate: score model: %w", err)
	}
	if len(c.Points) == 0 || len(c.Normals) != len(c.Points) {
		return nil, fmt.Errorf("validate: score model needs points with normals (%d points, %d normals)", len(c.Points), len(c.Normals))
	}
	m := &ScoreModel{Points: c.Points, Normals: c.Normals}
	if len(c.Colors) == len(c.Points) {
		m.HSV = make([]HSV, len(c.Colors))
		for i, col := range c.Colors {
			m.HSV[i] = HSVFromRGB(col)
		}
	}
	return m, nil
}

// ScoreDetail is a score with its diagnostics. Counts are of model
// points.
type ScoreDetail struct {
	// Score: higher is better. BaselineScore: Inliers/Expected in
	// [0, 1]; PointScore: the mean support in [−1, 1].
	Score float64
	// Expected counts the model points that face the camera under the
	// hypothesis and project inside the image.
	Expected int
	// Inliers counts those whose observed depth agrees (within the
	// tolerance); Missing those with no depth; Occluded those with the
	// observation in front; FreeSpace those with the observation behind
	// (the sensor saw through where the hypothesis puts surface).
	Inliers, Missing, Occluded, FreeSpace int
	// MeanNormalAngle (radians) and MeanColorDistance (ColorDistance)
	// average over the inliers that had the cue.
	MeanNormalAngle, MeanColorDistance float64
}

// minFacing is the cosine of the largest viewing angle at which a model
// point counts as visible: 85°, beyond which the sensor returns nothing
// (render.NoiseOptions drops grazing surfaces from 70–80°).
const minFacing = 0.087

// axialTolerance returns max(sigmas·σ_z(z, θ), floor), with σ_z the
// axial noise of Nguyen, Izadi & Lovell (2012) (render.AxialSigma) at
// the viewing angle θ with cos θ = cosTheta, capped at 80°.
func axialTolerance(z, cosTheta, sigmas, floor float64) float64 {
	theta := math.Acos(math.Min(1, math.Max(cosTheta, math.Cos(80*math.Pi/180))))
	return math.Max(sigmas*render.AxialSigma(z, theta), floor)
}

// BaselineOptions tunes BaselineScore.
type BaselineOptions struct {
	// Sigmas and MinTolerance set the depth tolerance
	// max(Sigmas·σ_z(z, θ), MinTolerance).
	// DEFAULT: 3 and 0.003 m
	Sigmas, MinTolerance float64
}

// DefaultBaselineOptions returns the documented defaults.
func DefaultBaselineOptions() BaselineOptions {
	return BaselineOptions{Sigmas: 3, MinTolerance: 0.003}
}

// BaselineScore is the depth-inlier count common in PPF pipelines'
// verification (common practice): of the model points that face the
// camera under modelToCam and project inside the image, the share whose
// observed depth at their pixel is within max(3σ_z, 3 mm) of their own
// depth. It allocates nothing.
func BaselineScore(m *ScoreModel, modelToCam mesh.Pose, obs *Observation, opt BaselineOptions) ScoreDetail {
	var d ScoreDetail
	w := obs.Intr.Width
	k := obs.Intr
	for i, p := range m.Points {
		pc := modelToCam.Apply(p)
		if !(pc.Z > 0) {
			continue
		}
		nc := modelToCam.Rotate(m.Normals[i])
		cosT := -r3.Dot(nc, pc) / r3.Norm(pc)
		if cosT < minFacing {
			continue
		}
		x, y, in := k.Pixel(pc)
		if !in {
			continue
		}
		d.Expected++
		zo := float64(obs.Depth[y*w+x])
		if !(zo > 0) {
			d.Missing++
			continue
		}
		tol := axialTolerance(pc.Z, cosT, opt.Sigmas, opt.MinTolerance)
		switch dz := zo - pc.Z; {
		case math.Abs(dz) <= tol:
			d.Inliers++
		case dz < 0:
			d.Occluded++
		default:
			d.FreeSpace++
		}
	}
	if d.Expected > 0 {
		d.Score = float64(d.Inliers) / float64(d.Expected)
	}
	return d
}

// PointScoreOptions tunes PointScore. The weights are meant to be
// calibrated per part on the check's own renders (CalibrateWeights);
// the defaults come from that calibration on the demo parts (see the
// package tests, TestCalibrateWeights).
type PointScoreOptions struct {
	// DepthSigmas and MinDepthTolerance set the depth scale
	// c_d = max(DepthSigmas·σ_z(z, θ), MinDepthTolerance).
	// DEFAULT: 3 and 0.003 m
	DepthSigmas, MinDepthTolerance float64
	// NormalScale is the angle (radians) at which the normal cue's
	// kernel reaches zero.
	// DEFAULT: 45° (0.785 rad)
	NormalScale float64
	// ColorScale is the ColorDistance at which the colour cue's kernel
	// reaches zero.
	// DEFAULT: 0.5
	ColorScale float64
	// NormalWeight and ColorWeight weigh the normal and colour cues
	// (each in [0, 1], their sum at most 1); the rest of the support of
	// a point at the right depth is unconditional. CalibrateWeights on
	// occluded renders of the demo parts chose NormalWeight 0 for both
	// parts tried (normals estimated from noisy depth add nothing the
	// depth does not already say) and ColorWeight 0.5 for the valve,
	// 0 for the labelbox; the default sits between.
	// DEFAULT: 0 and 0.25
	NormalWeight, ColorWeight float64
	// OcclusionPenalty is the support of a point whose observation lies
	// in front of it (something occludes it), and FreeSpacePenalty of
	// one whose observation lies behind it (the sensor saw through the
	// surface the hypothesis claims); both are subtracted, in [0, 1].
	// The calibration chose 0.3 and 1 for both parts.
	// DEFAULT: 0.3 and 1
	OcclusionPenalty, FreeSpacePenalty float64
	// Color weighs the colour distance.
	// DEFAULT: DefaultColorWeights()
	Color ColorWeights
}

// DefaultPointScoreOptions returns the documented defaults.
func DefaultPointScoreOptions() PointScoreOptions {
	return PointScoreOptions{
		DepthSigmas: 3, MinDepthTolerance: 0.003,
		NormalScale: 45 * math.Pi / 180, ColorScale: 0.5,
		NormalWeight: 0, ColorWeight: 0.25,
		OcclusionPenalty: 0.3, FreeSpacePenalty: 1,
		Color: DefaultColorWeights(),
	}
}

// Validate reports options out of range.
func (o PointScoreOptions) Validate() error {
	if !(o.DepthSigmas > 0) || !(o.MinDepthTolerance >= 0) || !(o.NormalScale > 0) || !(o.ColorScale > 0) {
		return fmt.Errorf("validate: point score scales %+v must be positive", o)
	}
	for _, w := range []float64{o.NormalWeight, o.ColorWeight, o.OcclusionPenalty, o.FreeSpacePenalty} {
		if !(w >= 0 && w <= 1) {
			return fmt.Errorf("validate: point score weight %v outside [0, 1]", w)
		}
	}
	if o.NormalWeight+o.ColorWeight > 1 {
		return fmt.Errorf("validate: point score NormalWeight + ColorWeight = %v > 1", o.NormalWeight+o.ColorWeight)
	}
	return nil
}

// tukey is Tukey's biweight (1 − r²)² for |r| < 1, else 0 (Beaton &
// Tukey 1974, Technometrics 16(2), DOI 10.1080/00401706.1974.10489171):
// a kernel in [0, 1] that ignores gross outliers completely.
func tukey(r float64) float64 {
	if r >= 1 || r <= -1 {
		return 0
	}
	u := 1 - r*r
	return u * u
}

// PointScore compares the hypothesis point by point with the
// observation, on depth, surface normal and colour, telling occlusion
// from free-space violation. For every model point that faces the
// camera under modelToCam (viewing angle below 85°) and projects inside
// the image (counted in Expected):
//
//   - no observed depth at its pixel: support 0 (missing data is
//     neutral);
//   - else Δ = z_obs − z_model at its pixel, or, when that misses the
//     depth scale c_d, the smallest |Δ| in its 3×3 neighbourhood (the
//     projection of a point at a silhouette may land a pixel off);
//     k_d = tukey(Δ/c_d) with c_d = max(3σ_z(z, θ), 3 mm) from the
//     sensor's axial noise (Nguyen et al. 2012);
//   - the cues: c_n = 2·tukey(angle(n_obs, n_model)/NormalScale) − 1
//     and c_c = 2·tukey(ColorDistance/ColorScale) − 1, each in [−1, 1]
//     (a cue the observation or model lacks gets weight 0);
//   - support s = k_d·[(1 − w_n − w_c) + w_n·c_n + w_c·c_c]
//     − (1 − k_d)·(Δ > 0 ? FreeSpacePenalty : OcclusionPenalty).
//
// s lies in [−1, 1]: +1 for a point seen where the hypothesis puts it
// with the right normal and colour; −FreeSpacePenalty where the sensor
// saw through it; −OcclusionPenalty where something stands in front (a
// clutter object or the part itself hiding its own back). The score is
// the sum of supports over Expected (0 when nothing is expected), so a
// hypothesis is rewarded for what it explains, not for how much of it
// is visible. It allocates nothing; the weights are handcrafted and
// calibrated by CalibrateWeights.
func PointScore(m *ScoreModel, modelToCam mesh.Pose, obs *Observation, opt PointScoreOptions) ScoreDetail {
	var d ScoreDetail
	w, h := obs.Intr.Width, obs.Intr.Height
	k := obs.Intr
	useNormal := obs.Normal != nil && opt.NormalWeight > 0
	useColor := obs.HSV != nil && m.HSV != nil && opt.ColorWeight > 0
	var sum, angSum, colSum float64
	var angN, colN int
	for i, p := range m.Points {
		pc := modelToCam.Apply(p)
		if !(pc.Z > 0) {
			continue
		}
		nc := modelToCam.Rotate(m.Normals[i])
		cosT := -r3.Dot(nc, pc) / r3.Norm(pc)
		if cosT < minFacing {
			continue
		}
		x, y, in := k.Pixel(pc)
		if !in {
			continue
		}
		d.Expected++
		pix := y*w + x
		zo := float64(obs.Depth[pix])
		if !(zo > 0) {
			d.Missing++
			continue
		}
		cd := axialTolerance(pc.Z, cosT, opt.DepthSigmas, opt.MinDepthTolerance)
		dz := zo - pc.Z
		if math.Abs(dz) > cd {
			// The nearest depth in the 3×3 neighbourhood.
			for yy := max(y-1, 0); yy <= min(y+1, h-1); yy++ {
				for xx := max(x-1, 0); xx <= min(x+1, w-1); xx++ {
					z2 := float64(obs.Depth[yy*w+xx])
					if z2 > 0 && math.Abs(z2-pc.Z) < math.Abs(dz) {
						dz, pix = z2-pc.Z, yy*w+xx
					}
				}
			}
		}
		kd := tukey(dz / cd)
		var s float64
		if kd > 0 {
			d.Inliers++
			wn, wc := 0.0, 0.0
			var cn, cc float64
			if useNormal {
				o := pix * 3
				no := r3.Vec{X: float64(obs.Normal[o]), Y: float64(obs.Normal[o+1]), Z: float64(obs.Normal[o+2])}
				if no != (r3.Vec{}) {
					ang := math.Acos(math.Max(-1, math.Min(1, r3.Dot(no, nc))))
					cn = 2*tukey(ang/opt.NormalScale) - 1
					wn = opt.NormalWeight
					angSum += ang
					angN++
				}
			}
			if useColor {
				cdist := ColorDistance(obs.HSV[pix], m.HSV[i], opt.Color)
				cc = 2*tukey(cdist/opt.ColorScale) - 1
				wc = opt.ColorWeight
				colSum += cdist
				colN++
			}
			s = kd * ((1 - wn - wc) + wn*cn + wc*cc)
		}
		if dz > 0 {
			s -= (1 - kd) * opt.FreeSpacePenalty
			if kd == 0 {
				d.FreeSpace++
			}
		} else {
			s -= (1 - kd) * opt.OcclusionPenalty
			if kd == 0 {
				d.Occluded++
			}
		}
		sum += s
	}
	if d.Expected > 0 {
		d.Score = sum / float64(d.Expected)
	}
	if angN > 0 {
		d.MeanNormalAngle = angSum / float64(angN)
	}
	if colN > 0 {
		d.MeanColorDistance = colSum / float64(colN)
	}
	return d
}
