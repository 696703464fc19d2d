package validate

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/spatial/r3"
)

// VerdictRules holds every threshold the verdict of a check rests on,
// in this one place, each with the reason it has its value. A finding
// argues for review (a person should look before the part goes to the
// cell) or rescan (the model is not good enough); the verdict is the
// worst finding's, ready when there is none. Findings that only inform
// (a symmetry) are reasons with the verdict ready.
//
// The values are our choices unless a source is named; the tests check
// that the good demo models pass them and the deliberately bad ones do
// not, each for its own reason.
type VerdictRules struct {
	// RescanRecall: below this share of synthetic views in which the
	// point-difference scorer picks a right pose, rescan — the cell
	// would miss the part in more than 1 view in 5, and retries would
	// eat its cycle time.
	// DEFAULT: 0.8
	RescanRecall float64
	// MinScannedViews: with at least this many views that show the part
	// by its scanned surface, RescanRecall and ReviewRecall are judged on
	// those views alone, and views that show unscanned surface get their
	// own finding (a second sweep, turned over). Fewer, and all views
	// count alike.
	MinScannedViews int
	// ReviewRecall: below this, review — the check's target recall
	// (ADD/ADD-S < 10 % of the diameter in at least 9 views in 10, with
	// clutter and occlusion) is not met.
	// DEFAULT: 0.9
	ReviewRecall float64
	// MinAcceptedRecall: the point-difference scorer's threshold is
	// calibrated to accept at most 1 % of wrong hypotheses
	// (CalibrationOptions.MaxFalseAccept: a wrong pose accepted is a bad
	// grasp); below this share of views in which the chosen pose is
	// right and also clears that threshold, right and wrong scores lie
	// too close for the threshold to work: review. The margin (5th
	// percentile of right scores less the 95th of wrong ones) is
	// reported beside it; on cluttered, occluded views it is often
	// negative even for good models (right poses of half-hidden parts
	// score low), so it does not decide on its own. It is judged on the
	// same views as the recall (those showing the scanned surface, when
	// there are MinScannedViews of them).
	// DEFAULT: 0.7
	MinAcceptedRecall float64
	// MinAUC: a point-scorer ROC area below this means the score ranks
	// a wrong hypothesis above a right one too often (more than 1 pair
	// in 10). Review.
	// DEFAULT: 0.9
	MinAUC float64
	// MinDiameter and MaxDiameter bound a plausible part (metres): a
	// model outside is in the wrong unit (a millimetre file read as
	// metres is 1000× too large) or not a part at all. Rescan (or fix
	// the unit).
	// DEFAULT: 0.005 and 2
	MinDiameter, MaxDiameter float64
	// ReviewHoleFraction and RescanHoleFraction bound the share of the
	// closed surface missing in holes (FindOpenings: openings neither on
	// the support nor facing down). Above the first, review: the cloud
	// lacks samples there and the scorer cannot tell the part's surface
	// from free space through the hole. A fusion of one sweep leaves the
	// mouths of blind bores open (5 % of the valve's surface on a
	// synthetic 36-frame turntable sweep), so only above the second,
	// rescan.
	// DEFAULT: 0.01 and 0.1
	ReviewHoleFraction, RescanHoleFraction float64
	// ReviewUndersideFraction: above this share of the closed surface
	// missing on undersides that face down (under a port or a flange,
	// which a sweep from above cannot see), review: the cell sees them
	// only when the part rests on another face.
	// DEFAULT: 0.1
	ReviewUndersideFraction float64
	// SupportGap: when the model's lowest point lies higher above the
	// support it stood on than max(MinSupportGap, SupportGapFraction ×
	// its height), its lower part was lost (cropped with the support,
	// never seen): rescan. The minimum allows for the support crop of a
	// fusion, under a voxel or two (2 mm voxels).
	// DEFAULT: 0.003 m and 0.05
	MinSupportGap, SupportGapFraction float64
	// ReviewSeen and RescanSeen bound the share of the coverage surface
	// the sweep saw, the face it stood on apart (when the support is
	// known): below the first, review; below the second, rescan. A sweep
	// cannot see what faces down (the undersides of ports and flanges):
	// two rings of views all round the valve, from 20° and 50° above its
	// support, see 83 % of it apart from its resting face
	// (TestCheckLowCoverage), a ring from 85° only its top, 19 %.
	// DEFAULT: 0.8 and 0.6
	ReviewSeen, RescanSeen float64
	// MaxScaleError: a scale against the reference off by more than
	// this share means a miscalibrated camera or a wrong unit: every
	// grasp would be off by as much. Depth cameras after calibration
	// typically keep their scale error well under 1 % (from memory, not
	// from a datasheet). Rescan.
	// DEFAULT: 0.01
	MaxScaleError float64
	// ReviewFScore and RescanFScore bound the F-score of the model
	// against the reference at the comparison's τ (Knapitsch et al.
	// 2017): below the first the shape departs from the drawing in
	// places (review the deviation map); below the second, rescan.
	// DEFAULT: 0.9 and 0.6
	ReviewFScore, RescanFScore float64
	// RescanCompleteness: below this share of the reference's surface
	// within τ of the model (the comparison's recall), the model lacks
	// part of the part (an unseen underside): rescan.
	// DEFAULT: 0.85
	RescanCompleteness float64
	// RescanRealRecall: below this share of the sweep's own frames in
	// which the best hypothesis is where the fusion put the part, the
	// model does not match the real part: rescan.
	// DEFAULT: 0.8
	RescanRealRecall float64
	// ReviewColorMismatch: above this share of the model's visible,
	// depth-matched points whose colour differs from the real frames'
	// (ColorDistance > 0.2, the symmetry detector's threshold), the
	// model's colours are smeared or shifted: the colour cue of the
	// scorer will mislead. Review. In frames rendered with sensor noise
	// and varied light, the demo parts' true colours mismatch on 1–17 %
	// of points (shading, dark bores; TestRealFramesTrueModels), the
	// labelbox blurred over 25 mm on about half (TestCheckSmearedColour).
	// DEFAULT: 0.25
	ReviewColorMismatch float64
	// ConfuserShare: another part is named as a confuser when, in at
	// least this share of the scenes rendered for the pair, the cell
	// looking for one accepts a pose of it in a scene of the other
	// (best score at or above its acceptance threshold). Review.
	// DEFAULT: 0.34 (one scene in three)
	ConfuserShare float64
	// ConfuserRatio: a part whose own acceptance threshold is not known
	// (a catalog part without one) is taken to accept a hypothesis
	// scoring at least this share of its median score at its true pose
	// in clean scenes. Our choice, not a calibration: the demo parts'
	// calibrated thresholds are lower (0.006–0.2 in their 60-view checks,
	// against clean medians of 0.25–0.55), being set on occluded views,
	// so an estimated threshold names fewer confusers than the part's
	// calibrated one would; a catalog that keeps each part's threshold
	// (NamedModel.Threshold) avoids the estimate.
	// DEFAULT: 0.5
	ConfuserRatio float64
}

// DefaultVerdictRules returns the documented defaults.
func DefaultVerdictRules() VerdictRules {
	return VerdictRules{
		RescanRecall:            0.8,
		ReviewRecall:            0.9,
		MinScannedViews:         10,
		MinAcceptedRecall:       0.7,
		MinAUC:                  0.9,
		MinDiameter:             0.005,
		MaxDiameter:             2,
		ReviewHoleFraction:      0.01,
		RescanHoleFraction:      0.1,
		ReviewUndersideFraction: 0.1,
		MinSupportGap:           0.003,
		SupportGapFraction:      0.05,
		ReviewSeen:              0.8,
		RescanSeen:              0.6,
		MaxScaleError:           0.01,
		ReviewFScore:            0.9,
		RescanFScore:            0.6,
		RescanCompleteness:      0.85,
		RescanRealRecall:        0.8,
		ReviewColorMismatch:     0.25,
		ConfuserShare:           0.34,
		ConfuserRatio:           0.5,
	}
}

// Validate reports rules out of range.
func (r VerdictRules) Validate() error {
	unit := []float64{r.RescanRecall, r.ReviewRecall, r.MinAcceptedRecall, r.MinAUC, r.ReviewHoleFraction, r.RescanHoleFraction, r.ReviewUndersideFraction,
		r.SupportGapFraction, r.ReviewSeen, r.RescanSeen, r.ReviewFScore, r.RescanFScore, r.RescanCompleteness,
		r.RescanRealRecall, r.ReviewColorMismatch, r.ConfuserShare, r.ConfuserRatio}
	for _, v := range unit {
		if !(v >= 0 && v <= 1) {
			return fmt.Errorf("validate: verdict rule %v outside [0, 1]", v)
		}
	}
	if !(r.MinDiameter > 0 && r.MinDiameter < r.MaxDiameter) || math.IsInf(r.MaxDiameter, 0) {
		return fmt.Errorf("validate: verdict diameters %v..%v", r.MinDiameter, r.MaxDiameter)
	}
	if r.MinScannedViews < 0 {
		return fmt.Errorf("validate: verdict MinScannedViews %d, want ≥ 0", r.MinScannedViews)
	}
	if !(r.MinSupportGap >= 0) || !(r.MaxScaleError >= 0) {
		return fmt.Errorf("validate: verdict MinSupportGap %v, MaxScaleError %v", r.MinSupportGap, r.MaxScaleError)
	}
	return nil
}

// Reason codes of a check.
const (
	CodeUnit             = "implausible-size"
	CodeLowRecall        = "low-recall"
	CodeUnscannedSide    = "unscanned-side"
	CodeThinMargin       = "thin-margin"
	CodeLowAUC           = "poor-separation"
	CodeHoles            = "holes"
	CodeMissingUnderside = "missing-underside"
	CodeRestingFace      = "resting-face-unseen"
	CodeUndersides       = "undersides-unseen"
	CodeRecesses         = "recesses-unseen"
	CodeRestsAsScanned   = "rests-as-scanned"
	CodeLowCoverage      = "low-coverage"
	CodeScale            = "scale-off"
	CodeShape            = "shape-deviation"
	CodeIncomplete       = "incomplete"
	CodeRealFrames       = "real-frames-miss"
	CodeColorMismatch    = "color-mismatch"
	CodeConfuser         = "confuser"
	CodeSymmetric        = "symmetric"
	CodeColorBreaks      = "color-breaks-symmetry"
	CodeColorSymmetric   = "color-keeps-symmetry"
	CodeNoCalibration    = "no-calibration"
	CodeNoViews          = "no-views"
)

// Judge returns the findings of a check by the rules, worst first in
// the order the rules are listed.
func (r VerdictRules) Judge(res *CheckResult) []Reason {
	var out []Reason
	add := func(v Verdict, code, format string, args ...any) {
		out = append(out, Reason{Verdict: v, Code: code, Message: fmt.Sprintf(format, args...)})
	}
	// Size first: nothing else is meaningful in the wrong unit.
	if d := res.Diameter; d < r.MinDiameter || d > r.MaxDiameter {
		hint := ""
		switch {
		case d > r.MaxDiameter && d/1000 >= r.MinDiameter && d/1000 <= r.MaxDiameter:
			hint = " — a model in millimetres read as metres? At 1/1000 it would be " + fmtLen(d/1000)
		case d < r.MinDiameter && d*1000 >= r.MinDiameter && d*1000 <= r.MaxDiameter:
			hint = " — a model in metres read as kilometres, or scaled by 1/1000? At 1000× it would be " + fmtLen(d*1000)
		}
		add(VerdictRescan, CodeUnit, "The model is %s across, outside the %s–%s of a part a cell handles%s. Check the unit of the scan (or of --mesh-unit) and scan again.",
			fmtLen(d), fmtLen(r.MinDiameter), fmtLen(r.MaxDiameter), hint)
		return out
	}
	// Recall and separation of the cell's scorer.
	if len(res.Views) == 0 {
		add(VerdictReview, CodeNoViews, "No synthetic views were rendered, so nothing shows that the cell finds the part: run the check with views.")
	} else {
		p := res.Point
		// Recall is judged on the views that show the part by what was
		// scanned. Views in which it rests showing a side the sweep never
		// saw (the face it stood on) are judged apart: they ask for a
		// second sweep with the part turned over, not a better one.
		recall, views, accepted := p.Recall, len(res.Views), p.AcceptedRecall
		exposed := views - p.Scanned
		if exposed > 0 && p.Scanned >= r.MinScannedViews {
			recall, views, accepted = p.ScannedRecall, p.Scanned, p.ScannedAcceptedRecall
		}
		if res.RestsAsScanned {
			add(VerdictReady, CodeRestsAsScanned, "The views show the part only resting as it stood in the sweep, as the cell presents it (a tray, a fixture, a conveyor). A part that can land in another pose, as in a bin, needs the check without that setting.")
		}
		switch {
		case recall < r.RescanRecall:
			add(VerdictRescan, CodeLowRecall, "The point-difference scorer found the part in %s of %d synthetic views that show it by its scanned surface (%s needed): the cell would miss it in more than 1 view in 5. The PPF votes put a right pose among their hypotheses in %s of all views. Scan again with more views of every side.",
				pct(recall), views, pct(r.RescanRecall), pct(res.Oracle))
		case recall < r.ReviewRecall:
			add(VerdictReview, CodeLowRecall, "The point-difference scorer found the part in %s of %d synthetic views that show it by its scanned surface, short of the %s target; look at the wrong views on the contact sheet.",
				pct(recall), views, pct(r.ReviewRecall))
		}
		if exposed > 0 && p.Scanned >= r.MinScannedViews && p.ExposedRecall < r.ReviewRecall && !res.RestsAsScanned {
			add(VerdictReview, CodeUnscannedSide, "In %d of %d views the part rests showing surface the sweep never saw (more than %s of its pixels); there the cell found it in only %s. If the part can rest that way in the cell, scan it again turned over and file the merged model.",
				exposed, len(res.Views), pct(maxUnscanned), pct(p.ExposedRecall))
		}
		if c := p.Calibration; c == nil {
			add(VerdictReview, CodeNoCalibration, "No acceptance threshold could be calibrated: the views gave no right or no wrong hypotheses (%d right, %d wrong).", len(p.Right), len(p.Wrong))
		} else {
			if accepted < r.MinAcceptedRecall {
				add(VerdictReview, CodeThinMargin, "At the threshold %.3f, which accepts %s of wrong poses, the cell would accept the right pose in only %s of the %d views (%s needed): right and wrong scores lie close (margin %.3f: the 5th percentile of right scores less the 95th of wrong ones). Decide which misses the cell can afford, or scan again for a cleaner model.",
					c.Threshold, pct(c.FalseAcceptRate), pct(accepted), views, pct(r.MinAcceptedRecall), c.Gap)
			}
			if c.AUC < r.MinAUC {
				add(VerdictReview, CodeLowAUC, "The point-difference score ranks a wrong hypothesis above a right one in %s of pairs (ROC area %.3f, %.2f needed): its threshold cannot separate them well.",
					pct(1-c.AUC), c.AUC, r.MinAUC)
			}
		}
	}
	// The model's own surface.
	if o := res.Openings; o != nil {
		gapLimit := math.Max(r.MinSupportGap, r.SupportGapFraction*o.Height)
		if o.SupportGap > gapLimit {
			add(VerdictRescan, CodeMissingUnderside, "The model stops %s above the support the part stood on (%s allowed): its lowest part was never captured or was cut away with the support. Scan again, and scan the part turned over so its underside is seen.",
				fmtLen(o.SupportGap), fmtLen(gapLimit))
		}
		largest := ""
		for _, op := range o.List {
			if !op.OnSupport && !op.Underside && !op.Recessed {
				largest = fmt.Sprintf("; the largest, %s, is at %s facing %s", fmtArea(op.Area), vec3mm(op.Centroid), facing(op.Normal))
				break
			}
		}
		switch {
		case o.HoleFraction > r.RescanHoleFraction:
			add(VerdictRescan, CodeHoles, "The model has holes covering %s of its surface (%s)%s. Scan those regions again.",
				pct(o.HoleFraction), fmtArea(o.HoleArea), largest)
		case o.HoleFraction > r.ReviewHoleFraction:
			add(VerdictReview, CodeHoles, "The model has holes covering %s of its surface (%s)%s. Look at them in the openings picture; rescan if they are on a face the cell sees.",
				pct(o.HoleFraction), fmtArea(o.HoleArea), largest)
		}
		if o.RecessFraction >= 0.001 {
			add(VerdictReady, CodeRecesses, "Openings inside recesses (%s, %s of the closed surface) were not scanned: no camera of the sweep could see into them past the part's own walls, and a cell's camera from similar viewpoints sees as little. The views that show them are counted apart.",
				fmtArea(o.RecessArea), pct(o.RecessFraction))
		}
		if res.RestsAsScanned {
			if o.UndersideFraction >= 0.001 {
				add(VerdictReady, CodeUndersides, "Undersides facing down (%s, %s of the closed surface) were not scanned; the cell presents the part resting as it stood in the sweep, so it does not see them either.",
					fmtArea(o.UndersideArea), pct(o.UndersideFraction))
			}
		} else if o.UndersideFraction > r.ReviewUndersideFraction {
			add(VerdictReview, CodeUndersides, "Undersides facing down (%s, %s of the closed surface) were not scanned: the cell sees them only when the part rests on another face. Scan the part turned over if it can rest so.",
				fmtArea(o.UndersideArea), pct(o.UndersideFraction))
		}
		if o.SupportArea > 0 {
			add(VerdictReady, CodeRestingFace, "The face the part stood on during the sweep (%s, %s of the closed surface) was not scanned, as no single sweep can. The cell sees it only when the part rests on another face; scan the part turned over if it does.",
				fmtArea(o.SupportArea), pct(o.SupportArea/o.closedArea()))
		}
	}
	if c := res.Coverage; c != nil && c.TotalArea > 0 {
		rest, resting := restingRegions(res)
		seen := c.SeenArea / math.Max(c.TotalArea-rest, 1e-300)
		where := ""
		for i, reg := range c.Unseen {
			if !resting[i] {
				// The coverage mesh is in the sweep's world frame; the
				// message speaks in the part frame, like the openings'.
				toPart := res.worldToPart
				where = fmt.Sprintf("; the largest unseen region, %s, is at %s facing %s", fmtArea(reg.Area), vec3mm(toPart.Apply(reg.Centroid)), facing(toPart.R.MulVec(reg.Normal)))
				break
			}
		}
		msg := "The sweep saw %s of the surface%s (%s unseen)%s."
		restNote := ""
		if rest > 0 {
			restNote = " apart from the face it stood on"
		}
		switch {
		case seen < r.RescanSeen:
			add(VerdictRescan, CodeLowCoverage, msg+" Scan again with views of every side, including from below the part's middle.",
				pct(seen), restNote, fmtArea(c.TotalArea-rest-c.SeenArea), where)
		case seen < r.ReviewSeen:
			add(VerdictReview, CodeLowCoverage, msg+" Look at the coverage map: rescan if the unseen region is one the cell sees.",
				pct(seen), restNote, fmtArea(c.TotalArea-rest-c.SeenArea), where)
		}
	}
	// Against the drawing.
	if c := res.Comparison; c != nil {
		if math.Abs(c.Scale-1) > r.MaxScaleError {
			hint := ""
			if c.UnitHint != "" {
				hint = " (" + c.UnitHint + ")"
			}
			add(VerdictRescan, CodeScale, "The model is %.4g× the size of the reference%s, more than the ±%s a calibrated camera gives: check the camera's depth scale and the file's unit, and scan again.",
				c.Scale, hint, pct(r.MaxScaleError))
		}
		switch {
		case c.Recall < r.RescanCompleteness:
			add(VerdictRescan, CodeIncomplete, "Only %s of the reference's surface lies within %s of the model: part of the part is missing (look at the deviation map). Scan again.",
				pct(c.Recall), fmtLen(c.Threshold))
		case c.FScore < r.RescanFScore:
			add(VerdictRescan, CodeShape, "The model agrees with the reference with an F-score of %s at %s (Hausdorff-95 %s): rescan.", pct(c.FScore), fmtLen(c.Threshold), fmtLen(c.Hausdorff95))
		case c.FScore < r.ReviewFScore:
			add(VerdictReview, CodeShape, "The model agrees with the reference with an F-score of %s at %s (Hausdorff-95 %s): look at the deviation map.", pct(c.FScore), fmtLen(c.Threshold), fmtLen(c.Hausdorff95))
		}
	}
	// Against reality.
	if rf := res.Real; rf != nil && len(rf.Frames) > 0 {
		if rf.Recall < r.RescanRealRecall {
			add(VerdictRescan, CodeRealFrames, "In the sweep's own frames the model found the part where the fusion put it in %s of %d frames (%s needed): the model does not match the real part. Scan again.",
				pct(rf.Recall), len(rf.Frames), pct(r.RescanRealRecall))
		}
		if rf.ColorChecked > 0 && rf.ColorMismatch > r.ReviewColorMismatch {
			add(VerdictReview, CodeColorMismatch, "The model's colour differs from the real frames' on %s of the visible surface (%s expected at most): its colours are smeared or shifted, so the scorer's colour cue works against it. Scan again in steady, even light, or lower the colour weight.",
				pct(rf.ColorMismatch), pct(r.ReviewColorMismatch))
		}
	}
	// Other parts.
	for _, c := range res.Confusers {
		if c.Forward.Share >= r.ConfuserShare || c.Reverse.Share >= r.ConfuserShare {
			var dirs []string
			if c.Forward.Share >= r.ConfuserShare {
				dirs = append(dirs, fmt.Sprintf("looking for %s it accepted %s in %d of %d scenes (best score %.3f, threshold %.3f)",
					res.Name, c.Name, c.Forward.Accepted, c.Forward.Scenes, c.Forward.Best, c.Forward.Threshold))
			}
			if c.Reverse.Share >= r.ConfuserShare {
				dirs = append(dirs, fmt.Sprintf("looking for %s it accepted %s in %d of %d scenes (best score %.3f, threshold %.3f)",
					c.Name, res.Name, c.Reverse.Accepted, c.Reverse.Scenes, c.Reverse.Best, c.Reverse.Threshold))
			}
			add(VerdictReview, CodeConfuser, "The cell could confuse %s with %s: %s. Keep them apart in the cell, or raise the threshold of the part that accepts the other.",
				res.Name, c.Name, strings.Join(dirs, "; "))
		}
	}
	// Notes.
	if s := res.Symmetry; s != nil {
		ss := SummarizeSymmetry(s)
		if len(s.Geometry) > 0 {
			add(VerdictReady, CodeSymmetric, "The part's shape is symmetric (%s): poses that differ by it count as the same (ADD-S).", ss.Describe(false))
			switch {
			case s.ColorBreaks():
				add(VerdictReady, CodeColorBreaks, "Its colours tell the symmetric poses apart (with colour: %s): the point-difference scorer chose the pose the right way round in %s of views, the baseline, blind to colour, in %s.",
					ss.Describe(true), pct(res.Point.ColorRecall), pct(res.Baseline.ColorRecall))
			case s.HasColor:
				add(VerdictReady, CodeColorSymmetric, "Its colours keep the symmetry: the cell cannot tell the symmetric poses apart. If the real part carries a mark or print, the scan lost it.")
			}
		}
	}
	return out
}

// restingRegions returns the area of the unseen coverage regions that
// are the face the part stood on — facing down (within 25°) with their
// centroid on the support, in the part frame — and which regions they
// are. Without a known support there are none.
func restingRegions(res *CheckResult) (float64, []bool) {
	c := res.Coverage
	if c == nil {
		return 0, nil
	}
	resting := make([]bool, len(c.Unseen))
	if res.Openings == nil || math.IsNaN(res.Openings.SupportZ) {
		return 0, resting
	}
	toPart := res.worldToPart
	tol := math.Max(0.02*res.Openings.Height, 0.003)
	var a float64
	for i, reg := range c.Unseen {
		p := toPart.Apply(reg.Centroid)
		n := toPart.Rotate(reg.Normal)
		if math.Abs(p.Z-res.Openings.SupportZ) <= tol && r3.Dot(n, r3.Vec{Z: -1}) > math.Cos(25*math.Pi/180) {
			resting[i] = true
			a += reg.Area
		}
	}
	return a, resting
}

func pct(x float64) string { return fmt.Sprintf("%.1f%%", 100*x) }

func fmtLen(m float64) string {
	switch a := math.Abs(m); {
	case a >= 1:
		return fmt.Sprintf("%.3g m", m)
	case a >= 1e-3 || a == 0:
		return fmt.Sprintf("%.3g mm", m*1e3)
	default:
		return fmt.Sprintf("%.3g µm", m*1e6)
	}
}

func fmtArea(a float64) string { return fmt.Sprintf("%.0f mm²", a*1e6) }
