package validate

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"runtime"
	"strings"
	"time"

	"gonum.org/v1/gonum/spatial/r3"
)

// ReportFormat names the layout of Report's JSON; it changes when a
// field changes meaning or is removed.
const ReportFormat = "scanfold-report/1"

// SafetyCaution is carried by every report and printed on every page
// that reaches a person.
const SafetyCaution = "A model that passes this check still needs a supervised, reduced-speed trial " +
	"in the robot cell before production use, under the cell's risk assessment and local safety rules " +
	"(industrial robot safety: ISO 10218-1 and ISO 10218-2; collaborative operation: ISO/TS 15066). " +
	"This report does not make a cell safe."

// Verdict is the outcome of a check.
type Verdict string

// The three verdicts, from best to worst.
const (
	// VerdictReady: the model let every scorer find the part well
	// enough; it can go to the cell's supervised trial.
	VerdictReady Verdict = "ready"
	// VerdictReview: usable, but a person should look at the reasons
	// (a symmetry, a confuser, a thin margin) first.
	VerdictReview Verdict = "review"
	// VerdictRescan: the model is not good enough; scan again.
	VerdictRescan Verdict = "rescan"
)

// rank orders verdicts: ready 0, review 1, rescan 2, anything else −1.
func (v Verdict) rank() int {
	switch v {
	case VerdictReady:
		return 0
	case VerdictReview:
		return 1
	case VerdictRescan:
		return 2
	}
	return -1
}

// Valid reports whether v is one of the three verdicts.
func (v Verdict) Valid() bool { return v.rank() >= 0 }

// Reason is one finding behind a verdict.
type Reason struct {
	// Verdict is the verdict the finding argues for on its own.
	Verdict Verdict `json:"verdict"`
	// Code is a short stable identifier for machines
	// ("low-recall", "unseen-region", "color-breaks-symmetry").
	Code string `json:"code"`
	// Message says what was found and what to do, for a person.
	Message string `json:"message"`
}

// Tool identifies the program that wrote a report.
type Tool struct {
	Name      string `json:"name"`
	Version   string `json:"version"`
	GoVersion string `json:"go_version"`
}

// ScorerResult is how one hypothesis scorer fared on the check views.
type ScorerResult struct {
	// Name of the scorer ("depth inliers", "point difference").
	Name string `json:"name"`
	// Recall is the share of check views in which the best-scored
	// hypothesis was a correct pose; Views is their number.
	Recall float64 `json:"recall"`
	Views  int     `json:"views"`
	// Threshold is the acceptance threshold on the score (accept at or
	// above it), with the shares of right and wrong hypotheses it
	// accepts and the ROC area (Calibration).
	Threshold       float64 `json:"threshold"`
	TrueAcceptRate  float64 `json:"true_accept_rate"`
	FalseAcceptRate float64 `json:"false_accept_rate"`
	AUC             float64 `json:"auc"`
	// Margin is the calibration's gap: the 5th percentile of the right
	// scores less the 95th percentile of the wrong ones (score units;
	// positive when the bulk of the two does not overlap).
	Margin float64 `json:"margin"`
	// RightScores and WrongScores are the scores of correct and wrong
	// hypotheses, for the histogram.
	RightScores []float64 `json:"right_scores,omitempty"`
	WrongScores []float64 `json:"wrong_scores,omitempty"`
}

// NewScorerResult fills a ScorerResult from a calibration and the
// scores it was made from.
func NewScorerResult(name string, recall float64, views int, c *Calibration, right, wrong []float64) ScorerResult {
	s := ScorerResult{Name: name, Recall: recall, Views: views,
		RightScores: append([]float64(nil), right...), WrongScores: append([]float64(nil), wrong...)}
	if c != nil {
		s.Threshold, s.TrueAcceptRate, s.FalseAcceptRate, s.AUC, s.Margin = c.Threshold, c.TrueAcceptRate, c.FalseAcceptRate, c.AUC, c.Gap
	}
	return s
}

// AxisSummary is one symmetry axis in a report: a unit direction in the
// part frame and its fold (0: continuous).
type AxisSummary struct {
	Axis [3]float64 `json:"axis"`
	Fold int        `json:"fold"`
}

// SymmetrySummary is the symmetry of a part as a report states it.
type SymmetrySummary struct {
	// Geometry and Color list the axes of the shape alone and of shape
	// and colour together.
	Geometry []AxisSummary `json:"geometry"`
	Color    []AxisSummary `json:"color,omitempty"`
	// HasColor reports that the model has colours; ColorBreaks that
	// they tell geometrically equivalent poses apart.
	HasColor    bool `json:"has_color"`
	ColorBreaks bool `json:"color_breaks"`
}

// SummarizeSymmetry turns what DetectSymmetry found into a report's
// summary.
func SummarizeSymmetry(s *SymmetryReport) *SymmetrySummary {
	if s == nil {
		return nil
	}
	conv := func(axes []SymmetryAxis) []AxisSummary {
		out := make([]AxisSummary, len(axes))
		for i, a := range axes {
			out[i] = AxisSummary{Axis: [3]float64{a.Axis.X, a.Axis.Y, a.Axis.Z}, Fold: a.Fold}
		}
		return out
	}
	return &SymmetrySummary{Geometry: conv(s.Geometry), Color: conv(s.Color), HasColor: s.HasColor, ColorBreaks: s.ColorBreaks()}
}

// Describe returns the symmetry in words ("6-fold about (0, 0, 1)";
// "none").
func (s *SymmetrySummary) Describe(color bool) string {
	if s == nil {
		return "not checked"
	}
	axes := s.Geometry
	if color {
		if !s.HasColor {
			return "no colours"
		}
		axes = s.Color
	}
	if len(axes) == 0 {
		return "none"
	}
	parts := make([]string, len(axes))
	for i, a := range axes {
		fold := fmt.Sprintf("%d-fold", a.Fold)
		if a.Fold == 0 {
			fold = "continuous"
		}
		parts[i] = fmt.Sprintf("%s about (%.2f, %.2f, %.2f)", fold, a.Axis[0], a.Axis[1], a.Axis[2])
	}
	return strings.Join(parts, "; ")
}

// Confuser is a wrong pose that a scorer rated close to, or above, the
// right one: a view of the part the cell may mistake for another.
type Confuser struct {
	// View is the index of the check view, Scorer the scorer's name.
	View   int    `json:"view"`
	Scorer string `json:"scorer"`
	// Score and RightScore are the wrong pose's score and the best right
	// pose's score in that view.
	Score      float64 `json:"score"`
	RightScore float64 `json:"right_score"`
	// RotationDeg and TranslationMM are how far the wrong pose is from
	// the nearest right one.
	RotationDeg   float64 `json:"rotation_deg"`
	TranslationMM float64 `json:"translation_mm"`
	// Note describes it for a person ("turned 180° about z").
	Note string `json:"note,omitempty"`
}

// Setting is one option a check or comparison ran with, as text.
type Setting struct {
	Name  string `json:"name"`
	Value string `json:"value"`
}

// Picture is one image file of a report folder.
type Picture struct {
	File    string `json:"file"`
	Title   string `json:"title"`
	Caption string `json:"caption"`
}

// CoverageSummary is the part of a Coverage that a report keeps.
type CoverageSummary struct {
	Frames       int       `json:"frames"`
	SeenFraction float64   `json:"seen_fraction"`
	SeenArea     float64   `json:"seen_area_m2"`
	TotalArea    float64   `json:"total_area_m2"`
	MeanViews    float64   `json:"mean_views"`
	Histogram    []ViewBin `json:"histogram"`
	// Largest lists the largest unseen regions, at most the number
	// asked for; UnseenRegions counts them all.
	Largest       []Region `json:"largest_unseen"`
	UnseenRegions int      `json:"unseen_regions"`
}

// Summary returns the figures of c with its n largest unseen regions.
func (c *Coverage) Summary(n int) *CoverageSummary {
	if c == nil {
		return nil
	}
	n = max(0, min(n, len(c.Unseen)))
	return &CoverageSummary{
		Frames: c.Frames, SeenFraction: c.SeenFraction, SeenArea: c.SeenArea, TotalArea: c.TotalArea,
		MeanViews: c.MeanViews, Histogram: c.Histogram, Largest: c.Unseen[:n], UnseenRegions: len(c.Unseen),
	}
}

// The kinds of report.
const (
	ReportKindCheck   = "check"   // a model check, with a verdict
	ReportKindCompare = "compare" // a scan-versus-reference comparison, without one
)

// Report is the result of a check (or a comparison) as data: JSON for
// machines (WriteJSON) and the source of the HTML page for people
// (WriteReport). The check command fills it.
type Report struct {
	// Format is ReportFormat; Kind is ReportKindCheck or
	// ReportKindCompare.
	Format string `json:"format"`
	Kind   string `json:"kind"`
	Tool   Tool   `json:"tool"`
	// Part is the part's name; Created when the report was made.
	Part    string    `json:"part"`
	Created time.Time `json:"created"`
	// Verdict is the outcome, Reasons the findings behind it; a
	// comparison has no verdict.
	Verdict Verdict  `json:"verdict,omitempty"`
	Reasons []Reason `json:"reasons"`
	// Safety is SafetyCaution.
	Safety string `json:"safety"`
	// Scorers, Symmetry, Coverage, Confusers and Comparison are the key
	// figures; any may be empty when that stage did not run.
	Scorers    []ScorerResult   `json:"scorers,omitempty"`
	Symmetry   *SymmetrySummary `json:"symmetry,omitempty"`
	Coverage   *CoverageSummary `json:"coverage,omitempty"`
	Confusers  []Confuser       `json:"confusers,omitempty"`
	Comparison *Comparison      `json:"comparison,omitempty"`
	// Check holds the check's own figures (CheckResult.Report).
	Check *CheckSummary `json:"check,omitempty"`
	// Timings, Settings and Notes record how the report was made.
	Timings  []Timing  `json:"timings,omitempty"`
	Settings []Setting `json:"settings,omitempty"`
	Notes    []string  `json:"notes,omitempty"`
	// Pictures lists the image files WriteReport wrote beside the page.
	Pictures []Picture `json:"pictures,omitempty"`
}

// NewReport returns a check report for part with verdict ready and no
// reasons yet, the safety caution, the current time and tool (its GoVersion
// filled in when empty).
func NewReport(part string, tool Tool) *Report {
	if tool.GoVersion == "" {
		tool.GoVersion = runtime.Version()
	}
	return &Report{
		Format:  ReportFormat,
		Kind:    ReportKindCheck,
		Tool:    tool,
		Part:    part,
		Created: time.Now().UTC().Truncate(time.Second),
		Verdict: VerdictReady,
		Safety:  SafetyCaution,
	}
}

// AddReason records a finding; the report's verdict becomes the worse
// of its current one and v (a report's verdict is its worst reason's).
// It panics on a verdict that is not one of the three (a programmer
// error).
func (r *Report) AddReason(v Verdict, code, message string) {
	if !v.Valid() {
		panic(fmt.Sprintf("validate: AddReason with verdict %q", v))
	}
	r.Reasons = append(r.Reasons, Reason{Verdict: v, Code: code, Message: message})
	if v.rank() > r.Verdict.rank() {
		r.Verdict = v
	}
}

// Validate reports a report that must not be written: no part name, an
// unknown kind, a check without a known verdict or a comparison with
// one, a verdict worse than ready without a reason or
// better than its worst reason, a missing safety caution, or a figure
// that is not a finite number (JSON cannot carry NaN).
func (r *Report) Validate() error {
	if strings.TrimSpace(r.Part) == "" {
		return errors.New("validate: report without a part name")
	}
	switch r.Kind {
	case ReportKindCheck:
		if !r.Verdict.Valid() {
			return fmt.Errorf("validate: report verdict %q is not ready, review or rescan", r.Verdict)
		}
	case ReportKindCompare:
		if r.Verdict != "" {
			return errors.New("validate: a comparison report carries no verdict")
		}
	default:
		return fmt.Errorf("validate: report kind %q is not %q or %q", r.Kind, ReportKindCheck, ReportKindCompare)
	}
	worst := 0
	for i, x := range r.Reasons {
		if !x.Verdict.Valid() {
			return fmt.Errorf("validate: report reason %d has verdict %q", i, x.Verdict)
		}
		worst = max(worst, x.Verdict.rank())
	}
	if r.Verdict.rank() > 0 && len(r.Reasons) == 0 {
		return fmt.Errorf("validate: report verdict %q without a reason", r.Verdict)
	}
	if r.Kind == ReportKindCheck && r.Verdict.rank() < worst {
		return fmt.Errorf("validate: report verdict %q is better than its worst reason", r.Verdict)
	}
	if r.Safety != SafetyCaution {
		return errors.New("validate: report without the safety caution")
	}
	for _, s := range r.Scorers {
		for _, v := range append(append([]float64{s.Recall, s.Threshold, s.Margin, s.TrueAcceptRate, s.FalseAcceptRate, s.AUC}, s.RightScores...), s.WrongScores...) {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("validate: scorer %q has a figure that is not finite (%v)", s.Name, v)
			}
		}
	}
	return nil
}

// WriteJSON writes r as indented JSON after Validate.
func (r *Report) WriteJSON(w io.Writer) error {
	if err := r.Validate(); err != nil {
		return err
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(r); err != nil {
		return fmt.Errorf("validate: report JSON: %w", err)
	}
	return nil
}

// Timing is the wall-clock time of one stage of a check or comparison.
type Timing struct {
	Stage   string  `json:"stage"`
	Seconds float64 `json:"seconds"`
}

// vec3mm formats a vector in millimetres for a person.
func vec3mm(v r3.Vec) string {
	return fmt.Sprintf("(%.1f, %.1f, %.1f) mm", v.X*1e3, v.Y*1e3, v.Z*1e3)
}
