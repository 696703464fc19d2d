package validate

import (
	"fmt"
	"image"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// CheckSummary holds the figures of a check that the other parts of a
// Report do not: the rankings side by side, the model's openings, the
// real-frame check, the other parts tested as confusers and the
// resting poses.
type CheckSummary struct {
	// Diameter (metres) and Views of the check.
	Diameter float64 `json:"diameter_m"`
	Views    int     `json:"views"`
	// Rankings compares the three ways of choosing a hypothesis per
	// view: the baseline, the point-difference scorer and the PPF
	// votes; Oracle is the share of views in which any hypothesis was
	// right (the best any scorer can do), and RecallRatio the point
	// scorer's recall over the baseline's.
	Rankings    []Ranking `json:"rankings"`
	Oracle      float64   `json:"oracle"`
	RecallRatio float64   `json:"recall_ratio"`
	// Weights says how the point score's weights were calibrated.
	Weights string `json:"weights"`
	// Openings, RealFrames and PartConfusers: see CheckResult.
	Openings      *Openings        `json:"openings,omitempty"`
	RealFrames    *RealFrameResult `json:"real_frames,omitempty"`
	PartConfusers []PartConfusion  `json:"part_confusers,omitempty"`
	// StablePoses lists the resting poses used by the scenes.
	StablePoses []StableSummary `json:"stable_poses,omitempty"`
}

// Ranking is one row of the side-by-side recall table.
type Ranking struct {
	Name        string  `json:"name"`
	Recall      float64 `json:"recall"`
	ColorRecall float64 `json:"color_recall"`
	MSSDRecall  float64 `json:"mssd_average_recall"`
	// AcceptedRecall: right and at or above the scorer's threshold.
	AcceptedRecall float64 `json:"accepted_recall"`
}

// StableSummary is one resting pose in a report.
type StableSummary struct {
	Probability float64    `json:"probability"`
	Normal      [3]float64 `json:"normal"`
	TipAngleDeg float64    `json:"tip_angle_deg"`
}

// Report turns the check into a report for part, with the tool that
// made it.
func (res *CheckResult) Report(tool Tool) *Report {
	r := NewReport(res.Name, tool)
	for _, x := range res.Reasons {
		r.AddReason(x.Verdict, x.Code, x.Message)
	}
	r.Timings = res.Timings
	r.Settings = res.Settings
	r.Notes = append([]string(nil), res.Notes...)
	if res.WeightsNote != "" {
		r.Notes = append(r.Notes, res.WeightsNote)
	}
	s := &CheckSummary{Diameter: res.Diameter, Views: len(res.Views), Oracle: res.Oracle, Weights: res.WeightsNote,
		Openings: res.Openings, RealFrames: res.Real, PartConfusers: res.Confusers}
	if len(res.Views) > 0 {
		for _, f := range []ScorerFigures{res.Baseline, res.Point, res.Votes} {
			s.Rankings = append(s.Rankings, Ranking{Name: f.Name, Recall: f.Recall, ColorRecall: f.ColorRecall, MSSDRecall: f.MSSDRecall, AcceptedRecall: f.AcceptedRecall})
		}
		if res.Baseline.Recall > 0 {
			s.RecallRatio = res.Point.Recall / res.Baseline.Recall
		}
		for _, f := range []ScorerFigures{res.Baseline, res.Point} {
			r.Scorers = append(r.Scorers, NewScorerResult(f.Name, f.Recall, len(res.Views), f.Calibration, f.Right, f.Wrong))
		}
	}
	if res.Stable != nil {
		for _, p := range res.Stable.Poses {
			s.StablePoses = append(s.StablePoses, StableSummary{Probability: p.Probability,
				Normal: [3]float64{p.Normal.X, p.Normal.Y, p.Normal.Z}, TipAngleDeg: p.TipAngle * 180 / math.Pi})
		}
	}
	r.Check = s
	r.Symmetry = SummarizeSymmetry(res.Symmetry)
	if res.Coverage != nil {
		r.Coverage = res.Coverage.Summary(5)
	}
	r.Comparison = res.Comparison
	r.Confusers = res.viewConfusers()
	return r
}

// viewConfusers lists the views in which the point scorer rated a wrong
// hypothesis above every right one, while a right one was at hand.
func (res *CheckResult) viewConfusers() []Confuser {
	var out []Confuser
	for i := range res.Views {
		v := &res.Views[i]
		if v.BestPoint < 0 || v.Hypotheses[v.BestPoint].Correct {
			continue
		}
		bestRight := math.Inf(-1)
		for _, h := range v.Hypotheses {
			if h.Correct && !h.Extra {
				bestRight = math.Max(bestRight, h.PointHeldOut)
			}
		}
		if math.IsInf(bestRight, -1) {
			continue
		}
		w := v.Hypotheses[v.BestPoint]
		// The wrong pose relative to the nearest symmetric equivalent of
		// the truth, in the part frame.
		bestAng := math.Inf(1)
		var rel mesh.Pose
		syms := res.syms
		if len(syms) == 0 {
			syms = []mesh.Pose{mesh.Identity()}
		}
		for _, sy := range syms {
			t := v.Truth.Mul(sy)
			if a := mesh.RotationAngle(t, w.ModelToCam); a < bestAng {
				bestAng, rel = a, t.Inv().Mul(w.ModelToCam)
			}
		}
		axis, ang := rel.AxisAngle()
		c := Confuser{View: v.Index, Scorer: ScorerPoint, Score: w.PointHeldOut, RightScore: bestRight,
			RotationDeg: ang * 180 / math.Pi, TranslationMM: r3.Norm(r3.Sub(v.Truth.T, w.ModelToCam.T)) * 1e3}
		if ang > 5*math.Pi/180 {
			c.Note = fmt.Sprintf("turned %.0f° about the part's (%.2f, %.2f, %.2f)", ang*180/math.Pi, axis.X, axis.Y, axis.Z)
		} else {
			c.Note = "shifted"
		}
		out = append(out, c)
	}
	return out
}

// ReportInputs returns the meshes and views the report's pictures are
// drawn from: the model, the coverage surface, the check views (the
// point scorer's choice in each) and the openings picture.
func (res *CheckResult) ReportInputs(opt PictureOptions) ReportInputs {
	in := ReportInputs{Model: res.model, CoverageMesh: res.CoverageMesh, Coverage: res.Coverage}
	for i := range res.Views {
		v := &res.Views[i]
		cv := CheckView{Intr: v.intr, Label: fmt.Sprintf("%.0f%% seen", 100*v.VisibleFraction)}
		if v.thumb != nil {
			cv.Image = v.thumb
		}
		if v.BestPoint >= 0 {
			cv.ModelToCam = v.Hypotheses[v.BestPoint].ModelToCam
			cv.Correct = v.Hypotheses[v.BestPoint].Correct
		} else {
			// No hypothesis: nothing to outline (a pose behind the
			// camera draws nothing).
			cv.ModelToCam = mesh.Pose{R: mesh.Identity3(), T: r3.Vec{Z: -10}}
			cv.Label = "no hypothesis"
		}
		in.Views = append(in.Views, cv)
	}
	if o := res.Openings; o != nil && len(o.List) > 0 && res.model != nil {
		patched := o.PatchedMesh(res.model, opt.ModelColor, mesh.RGB{R: 255, G: 0, B: 255})
		if img, err := SixSides(patched, opt); err == nil {
			in.Extra = append(in.Extra, ExtraPicture{File: "openings.png", Title: "Openings of the model",
				Caption: fmt.Sprintf("The model from six sides with its %d openings closed by magenta patches (%s in holes, %s on undersides facing down, %s where it stood on its support).",
					len(o.List), fmtArea(o.HoleArea), fmtArea(o.UndersideArea), fmtArea(o.SupportArea)),
				Image: img})
		}
	}
	return in
}

// ExtraPicture is a picture a report shows beyond the standard ones.
type ExtraPicture struct {
	File, Title, Caption string
	Image                image.Image
}
