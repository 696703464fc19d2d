package validate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Percentile returns the p-th quantile (p in [0, 1]) of x by linear
// interpolation between order statistics at position (n − 1)·p (type 7
// of Hyndman & Fan 1996, "Sample quantiles in statistical packages",
// The American Statistician 50(4), DOI 10.1080/00031305.1996.10473566).
// x is not changed. Empty x gives NaN.
func Percentile(x []float64, p float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), x...)
	sort.Float64s(s)
	return percentileSorted(s, p)
}

func percentileSorted(s []float64, p float64) float64 {
	p = math.Max(0, math.Min(1, p))
	h := float64(len(s)-1) * p
	lo := int(math.Floor(h))
	hi := min(lo+1, len(s)-1)
	return s[lo] + (h-float64(lo))*(s[hi]-s[lo])
}

// AUC returns the area under the ROC curve of scores that should rank
// right above wrong: the probability that a random right score exceeds
// a random wrong one, ties counting one half. This is the Mann–Whitney U
// statistic over n₁·n₀ (Hanley & McNeil 1982, Radiology 143(1), DOI
// 10.1148/radiology.143.1.7063747), computed from the ranks of the
// pooled scores in O(n log n). Empty input gives NaN.
func AUC(right, wrong []float64) float64 {
	if len(right) == 0 || len(wrong) == 0 {
		return math.NaN()
	}
	type item struct {
		v     float64
		right bool
	}
	all := make([]item, 0, len(right)+len(wrong))
	for _, v := range right {
		all = append(all, item{v, true})
	}
	for _, v := range wrong {
		all = append(all, item{v, false})
	}
	sort.Slice(all, func(i, j int) bool { return all[i].v < all[j].v })
	// Mid-ranks (1-based) for ties.
	var rankSum float64
	for i := 0; i < len(all); {
		j := i
		for j < len(all) && all[j].v == all[i].v {
			j++
		}
		mid := float64(i+j+1) / 2 // mean of ranks i+1 … j
		for k := i; k < j; k++ {
			if all[k].right {
				rankSum += mid
			}
		}
		i = j
	}
	n1, n0 := float64(len(right)), float64(len(wrong))
	u := rankSum - n1*(n1+1)/2
	return u / (n1 * n0)
}

// Histogram is a plain histogram for reports: Counts[i] counts the
// values in [Edges[i], Edges[i+1]) (the last bin includes its upper
// edge).
type Histogram struct {
	Edges  []float64 `json:"edges"`
	Counts []int     `json:"counts"`
}

// NewHistogram bins x into bins equal bins over [lo, hi]; values
// outside are clamped into the first or last bin, NaN is skipped.
func NewHistogram(x []float64, lo, hi float64, bins int) Histogram {
	bins = max(bins, 1)
	if !(hi > lo) {
		hi = lo + 1
	}
	h := Histogram{Edges: make([]float64, bins+1), Counts: make([]int, bins)}
	for i := range h.Edges {
		h.Edges[i] = lo + (hi-lo)*float64(i)/float64(bins)
	}
	for _, v := range x {
		if math.IsNaN(v) {
			continue
		}
		b := int(math.Floor((v - lo) / (hi - lo) * float64(bins)))
		h.Counts[max(0, min(bins-1, b))]++
	}
	return h
}

// CalibrationOptions tunes Calibrate.
type CalibrationOptions struct {
	// MaxFalseAccept is the largest share of wrong hypotheses the
	// threshold may accept: among thresholds that keep the false-accept
	// rate at or below it, Calibrate takes the one with the best F1; if
	// none does (the distributions overlap badly), the threshold just
	// above every wrong score. 1 means plain F1.
	// DEFAULT: 0.01
	MaxFalseAccept float64
	// Bins is the number of histogram bins.
	// DEFAULT: 40
	Bins int
}

// DefaultCalibrationOptions returns the documented defaults.
func DefaultCalibrationOptions() CalibrationOptions {
	return CalibrationOptions{MaxFalseAccept: 0.01, Bins: 40}
}

// Calibration is the acceptance threshold for one part and scorer, and
// how well the scores separate right from wrong hypotheses.
type Calibration struct {
	// Threshold: accept a hypothesis when its score is ≥ Threshold.
	Threshold float64 `json:"threshold"`
	// At the threshold: the share of right hypotheses accepted
	// (TrueAcceptRate, the recall), of wrong ones accepted
	// (FalseAcceptRate), precision and F1.
	TrueAcceptRate  float64 `json:"true_accept_rate"`
	FalseAcceptRate float64 `json:"false_accept_rate"`
	Precision       float64 `json:"precision"`
	F1              float64 `json:"f1"`
	// AUC is the ROC area (AUC); RightP5 and WrongP95 the 5th percentile
	// of right and 95th of wrong scores, and Gap = RightP5 − WrongP95
	// (positive: the bulk of the two distributions does not overlap).
	AUC      float64 `json:"auc"`
	RightP5  float64 `json:"right_p5"`
	WrongP95 float64 `json:"wrong_p95"`
	Gap      float64 `json:"gap"`
	// NRight and NWrong count the scores; Right and Wrong are their
	// histograms over one common range.
	NRight int       `json:"n_right"`
	NWrong int       `json:"n_wrong"`
	Right  Histogram `json:"right"`
	Wrong  Histogram `json:"wrong"`
}

// Calibrate picks the acceptance threshold the cell should use from
// the scores of right and wrong hypotheses (labelled by ADD(-S) below
// 10 % of the diameter, see LabelHypotheses): the threshold with the
// best F1 among those whose false-accept rate is at most
// opt.MaxFalseAccept (a wrong pose accepted is a bad grasp; a right one
// rejected only costs a retry). Candidate thresholds are the observed
// scores themselves. It returns an error when either set is empty or a
// score is NaN.
func Calibrate(right, wrong []float64, opt CalibrationOptions) (*Calibration, error) {
	if len(right) == 0 || len(wrong) == 0 {
		return nil, fmt.Errorf("validate: calibration needs right and wrong scores (%d right, %d wrong)", len(right), len(wrong))
	}
	for _, set := range [][]float64{right, wrong} {
		for i, v := range set {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("validate: calibration score %d is %v", i, v)
			}
		}
	}
	if !(opt.MaxFalseAccept >= 0 && opt.MaxFalseAccept <= 1) {
		return nil, fmt.Errorf("validate: calibration MaxFalseAccept %v outside [0, 1]", opt.MaxFalseAccept)
	}
	r := append([]float64(nil), right...)
	w := append([]float64(nil), wrong...)
	sort.Float64s(r)
	sort.Float64s(w)
	c := &Calibration{NRight: len(r), NWrong: len(w), AUC: AUC(r, w)}
	c.RightP5 = percentileSorted(r, 0.05)
	c.WrongP95 = percentileSorted(w, 0.95)
	c.Gap = c.RightP5 - c.WrongP95
	// Accepted at threshold t: scores ≥ t. Counting by binary search.
	atLeast := func(s []float64, t float64) int { return len(s) - sort.SearchFloat64s(s, t) }
	evaluate := func(t float64) (tar, far, prec, f1 float64) {
		tp := float64(atLeast(r, t))
		fp := float64(atLeast(w, t))
		tar = tp / float64(len(r))
		far = fp / float64(len(w))
		if tp+fp > 0 {
			prec = tp / (tp + fp)
		}
		if prec+tar > 0 {
			f1 = 2 * prec * tar / (prec + tar)
		}
		return
	}
	best := math.Inf(-1)
	found := false
	for _, t := range append(append([]float64(nil), r...), w...) {
		tar, far, prec, f1 := evaluate(t)
		if far > opt.MaxFalseAccept {
			continue
		}
		if f1 > best || (f1 == best && t < c.Threshold) {
			best, found = f1, true
			c.Threshold, c.TrueAcceptRate, c.FalseAcceptRate, c.Precision, c.F1 = t, tar, far, prec, f1
		}
	}
	if !found {
		t := math.Nextafter(w[len(w)-1], math.Inf(1))
		c.Threshold = t
		c.TrueAcceptRate, c.FalseAcceptRate, c.Precision, c.F1 = evaluate(t)
	}
	lo := math.Min(r[0], w[0])
	hi := math.Max(r[len(r)-1], w[len(w)-1])
	bins := opt.Bins
	if bins <= 0 {
		bins = 40
	}
	c.Right = NewHistogram(r, lo, hi, bins)
	c.Wrong = NewHistogram(w, lo, hi, bins)
	return c, nil
}

// LabelHypotheses labels each hypothesis right when its ADD (or ADD-S
// for a symmetric part) from truth is below 10 % of the diameter
// (ErrorModel.Correct).
func LabelHypotheses(em *ErrorModel, truth mesh.Pose, hyps []mesh.Pose, symmetric bool) []bool {
	out := make([]bool, len(hyps))
	for i, h := range hyps {
		out[i] = em.Correct(truth, h, symmetric)
	}
	return out
}

// PerturbedHypotheses returns n hypotheses around the true pose truth
// (model to camera) of a part of the given diameter whose centre, in
// the part frame, is centre: every third one near the truth (turned by
// up to 3° about a random axis through the centre, shifted by up to
// 2 % of the diameter), the others wrong in the ways a PPF vote goes
// wrong (turned by 20°–180°, or by one of 90° and 180° about a random
// axis, and shifted by up to 30 % of the diameter). Label them with
// LabelHypotheses: near ones can still be wrong and far ones right on a
// symmetric part.
func PerturbedHypotheses(truth mesh.Pose, centre r3.Vec, diameter float64, n int, rng *rand.Rand) []mesh.Pose {
	out := make([]mesh.Pose, 0, n)
	cCam := truth.Apply(centre)
	for i := 0; i < n; i++ {
		var angle, shift float64
		switch i % 3 {
		case 0:
			angle = rng.Float64() * 3 * math.Pi / 180
			shift = rng.Float64() * 0.02 * diameter
		case 1:
			angle = (20 + 160*rng.Float64()) * math.Pi / 180
			shift = rng.Float64() * 0.3 * diameter
		default:
			angle = math.Pi / 2
			if rng.IntN(2) == 1 {
				angle = math.Pi
			}
			shift = rng.Float64() * 0.3 * diameter
		}
		// Turn about the part's centre in the camera frame, then shift.
		rot := mesh.Pose{R: mesh.RotationFromAxisAngle(randomUnit(rng), angle)}
		rot.T = r3.Sub(cCam, rot.R.MulVec(cCam))
		move := mesh.Pose{R: mesh.Identity3(), T: r3.Scale(shift, randomUnit(rng))}
		out = append(out, move.Mul(rot).Mul(truth))
	}
	return out
}

// Labelled is one hypothesis with its observation and label, for
// CalibrateWeights.
type Labelled struct {
	Obs        *Observation
	ModelToCam mesh.Pose
	Right      bool
}

// WeightGrid lists the values CalibrateWeights tries for each weight of
// PointScoreOptions.
type WeightGrid struct {
	NormalWeight, ColorWeight, OcclusionPenalty, FreeSpacePenalty []float64
}

// DefaultWeightGrid returns a small grid: 3 × 4 × 3 × 3 = 108
// combinations (those with NormalWeight + ColorWeight > 1 skipped).
func DefaultWeightGrid() WeightGrid {
	return WeightGrid{
		NormalWeight:     []float64{0, 0.25, 0.5},
		ColorWeight:      []float64{0, 0.25, 0.5, 0.75},
		OcclusionPenalty: []float64{0, 0.1, 0.3},
		FreeSpacePenalty: []float64{0.3, 0.6, 1},
	}
}

// Separation measures how well scores tell right from wrong: the ROC
// area and the gap between the 5th percentile of right scores and the
// 95th of wrong ones.
type Separation struct {
	AUC, Gap float64
}

// better orders separations: larger AUC, then (within 1e−9) larger gap.
func (s Separation) better(o Separation) bool {
	if math.Abs(s.AUC-o.AUC) > 1e-9 {
		return s.AUC > o.AUC
	}
	return s.Gap > o.Gap
}

// Separate returns the separation of right and wrong scores.
func Separate(right, wrong []float64) Separation {
	if len(right) == 0 || len(wrong) == 0 {
		return Separation{AUC: math.NaN(), Gap: math.NaN()}
	}
	return Separation{AUC: AUC(right, wrong), Gap: Percentile(right, 0.05) - Percentile(wrong, 0.95)}
}

// combinations returns the grid's weight combinations on top of base,
// in the order CalibrateWeights tries them (normal weight, colour
// weight, occlusion penalty, free-space penalty, the last varying
// fastest), leaving out those whose normal and colour weights sum above
// 1. An empty axis or a combination base makes invalid is an error.
func (grid WeightGrid) combinations(base PointScoreOptions) ([]PointScoreOptions, error) {
	if len(grid.NormalWeight) == 0 || len(grid.ColorWeight) == 0 || len(grid.OcclusionPenalty) == 0 || len(grid.FreeSpacePenalty) == 0 {
		return nil, errors.New("validate: weight calibration grid has an empty axis")
	}
	var out []PointScoreOptions
	for _, wn := range grid.NormalWeight {
		for _, wc := range grid.ColorWeight {
			if wn+wc > 1 {
				continue
			}
			for _, wo := range grid.OcclusionPenalty {
				for _, wf := range grid.FreeSpacePenalty {
					o := base
					o.NormalWeight, o.ColorWeight, o.OcclusionPenalty, o.FreeSpacePenalty = wn, wc, wo, wf
					if err := o.Validate(); err != nil {
						return nil, err
					}
					out = append(out, o)
				}
			}
		}
	}
	return out, nil
}

// CalibrateWeights picks PointScore's weights on a small grid to
// separate right from wrong hypotheses on labelled scenes (the check's
// own renders): every combination of the grid's values, with the other
// options from base, scores every hypothesis; the combination with the
// largest ROC area wins, ties broken by the larger gap between the 5th
// percentile of right and the 95th of wrong scores, and then by the
// order of the grid (the first listed wins). It returns the options
// and their separation, or an error when the set lacks right or wrong
// hypotheses.
func CalibrateWeights(m *ScoreModel, set []Labelled, base PointScoreOptions, grid WeightGrid) (PointScoreOptions, Separation, error) {
	nr := 0
	for _, l := range set {
		if l.Right {
			nr++
		}
	}
	if nr == 0 || nr == len(set) {
		return base, Separation{}, fmt.Errorf("validate: weight calibration needs right and wrong hypotheses (%d right of %d)", nr, len(set))
	}
	combos, err := grid.combinations(base)
	if err != nil {
		return base, Separation{}, err
	}
	best := base
	bestSep := Separation{AUC: math.Inf(-1), Gap: math.Inf(-1)}
	right := make([]float64, 0, nr)
	wrong := make([]float64, 0, len(set)-nr)
	for _, opt := range combos {
		right, wrong = right[:0], wrong[:0]
		for _, l := range set {
			s := PointScore(m, l.ModelToCam, l.Obs, opt).Score
			if l.Right {
				right = append(right, s)
			} else {
				wrong = append(wrong, s)
			}
		}
		if sep := Separate(right, wrong); sep.better(bestSep) {
			best, bestSep = opt, sep
		}
	}
	return best, bestSep, nil
}
