package validate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/integrate"
	"gonum.org/v1/gonum/stat"
)

// AUC against two outside references: the brute-force definition (the
// share of (right, wrong) pairs ranked correctly, ties one half) and
// the trapezoidal area under gonum's ROC curve (stat.ROC with
// integrate.Trapezoidal), on random scores with ties.
func TestAUCAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for trial := 0; trial < 10; trial++ {
		right := make([]float64, 30+rng.IntN(50))
		wrong := make([]float64, 30+rng.IntN(50))
		for i := range right {
			right[i] = math.Round(rng.NormFloat64()*4+3) / 4 // quarter steps: ties
		}
		for i := range wrong {
			wrong[i] = math.Round(rng.NormFloat64()*4) / 4
		}
		var pairs float64
		for _, r := range right {
			for _, w := range wrong {
				switch {
				case r > w:
					pairs++
				case r == w:
					pairs += 0.5
				}
			}
		}
		brute := pairs / float64(len(right)*len(wrong))
		got := AUC(right, wrong)
		// Exact rational arithmetic up to float rounding of sums of
		// halves over a few thousand pairs.
		if !near(got, brute, 1e-12) {
			t.Fatalf("trial %d: AUC %v, pair count %v", trial, got, brute)
		}
		// gonum: ROC over the pooled scores with class labels; the
		// trapezoid rule on (FPR, TPR) gives ties one half too.
		var y []float64
		var classes []bool
		for _, r := range right {
			y, classes = append(y, r), append(classes, true)
		}
		for _, w := range wrong {
			y, classes = append(y, w), append(classes, false)
		}
		stat.SortWeightedLabeled(y, classes, nil)
		tpr, fpr, _ := stat.ROC(nil, y, classes, nil)
		if area := integrate.Trapezoidal(fpr, tpr); !near(got, area, 1e-12) {
			t.Fatalf("trial %d: AUC %v, gonum ROC area %v", trial, got, area)
		}
	}
}

// Percentile is type 7 of Hyndman & Fan (1996): for x = 1…10 the 5th
// percentile sits at position 9·0.05 = 0.45, i.e. 1.45, and the 95th at
// position 8.55, i.e. 9.55, both worked by hand from the definition.
func TestPercentile(t *testing.T) {
	x := []float64{10, 9, 8, 7, 6, 5, 4, 3, 2, 1}
	if p := Percentile(x, 0.05); !near(p, 1.45, 1e-12) {
		t.Errorf("P5 = %v, want 1.45", p)
	}
	if p := Percentile(x, 0.95); !near(p, 9.55, 1e-12) {
		t.Errorf("P95 = %v, want 9.55", p)
	}
	if p := Percentile(x, 0.5); !near(p, 5.5, 1e-12) {
		t.Errorf("median = %v, want 5.5", p)
	}
	if x[0] != 10 {
		t.Error("Percentile changed its input")
	}
	if !math.IsNaN(Percentile(nil, 0.5)) {
		t.Error("empty input: want NaN")
	}
}

func TestCalibrate(t *testing.T) {
	// Separated: right 0.6…0.9, wrong 0…0.3. Any threshold in (0.3, 0.6]
	// accepts all right and no wrong; the lowest such observed score is
	// 0.6, with F1 = 1 and AUC = 1, gap 0.615 − 0.285 = 0.33.
	right := []float64{0.6, 0.7, 0.8, 0.9}
	wrong := []float64{0, 0.1, 0.2, 0.3}
	c, err := Calibrate(right, wrong, DefaultCalibrationOptions())
	if err != nil {
		t.Fatal(err)
	}
	if c.Threshold != 0.6 || c.F1 != 1 || c.AUC != 1 || c.FalseAcceptRate != 0 {
		t.Errorf("separated: %+v", c)
	}
	// P5 of right: 0.6 + 0.15·0.1 = 0.615; P95 of wrong: 0.2 + 0.85·0.1 = 0.285.
	if !near(c.Gap, 0.615-0.285, 1e-12) {
		t.Errorf("gap %v, want 0.33", c.Gap)
	}
	total := 0
	for _, n := range c.Right.Counts {
		total += n
	}
	if total != 4 || len(c.Right.Edges) != len(c.Right.Counts)+1 {
		t.Errorf("histogram %+v", c.Right)
	}

	// Overlapping: wrong = {0.5, 0.95}; with at most 1 % false accepts
	// the threshold must exceed 0.95, where nothing right is accepted.
	c, err = Calibrate(right, []float64{0.5, 0.95}, DefaultCalibrationOptions())
	if err != nil {
		t.Fatal(err)
	}
	if !(c.Threshold > 0.95) || c.TrueAcceptRate != 0 || c.FalseAcceptRate != 0 {
		t.Errorf("overlap, strict: %+v", c)
	}
	// Plain F1 (MaxFalseAccept 1): threshold 0.6 accepts 4 right and
	// the 0.95 wrong: precision 0.8, recall 1, F1 = 8/9.
	c, _ = Calibrate(right, []float64{0.5, 0.95}, CalibrationOptions{MaxFalseAccept: 1, Bins: 10})
	if c.Threshold != 0.6 || !near(c.F1, 8.0/9, 1e-12) {
		t.Errorf("overlap, F1: threshold %v F1 %v", c.Threshold, c.F1)
	}
	if _, err := Calibrate(nil, wrong, DefaultCalibrationOptions()); err == nil {
		t.Error("no right scores: want an error")
	}
	if _, err := Calibrate(right, []float64{math.NaN()}, DefaultCalibrationOptions()); err == nil {
		t.Error("NaN score: want an error")
	}
}
