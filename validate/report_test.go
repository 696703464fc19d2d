package validate

import (
	"bytes"
	"context"
	"encoding/json"
	"html"
	"image"
	"image/color"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/render"
)

func TestReportVerdict(t *testing.T) {
	r := NewReport("bracket", Tool{Name: "scanfold", Version: "test"})
	if r.Verdict != VerdictReady || r.Validate() != nil || r.Safety != SafetyCaution {
		t.Fatalf("new report: %+v, %v", r, r.Validate())
	}
	r.AddReason(VerdictReview, "color-breaks-symmetry", "the paint mark is the only cue")
	r.AddReason(VerdictReady, "coverage", "seen from every side")
	if r.Verdict != VerdictReview {
		t.Errorf("verdict %q after a review reason, want review", r.Verdict)
	}
	r.AddReason(VerdictRescan, "low-recall", "recall 40%")
	r.AddReason(VerdictReview, "confuser", "one")
	if r.Verdict != VerdictRescan || r.Validate() != nil {
		t.Errorf("verdict %q (%v), want rescan", r.Verdict, r.Validate())
	}
	bad := []func(*Report){
		func(r *Report) { r.Part = " " },
		func(r *Report) { r.Verdict = "maybe" },
		func(r *Report) { r.Verdict = VerdictReady }, // better than its worst reason
		func(r *Report) { r.Safety = "" },
		func(r *Report) { r.Reasons = nil },                                  // rescan without a reason
		func(r *Report) { r.Scorers = []ScorerResult{{Recall: math.NaN()}} }, // JSON cannot hold NaN
		func(r *Report) { r.Kind = "other" },
	}
	for i, f := range bad {
		c := *r
		f(&c)
		if c.Validate() == nil {
			t.Errorf("bad report %d passes Validate", i)
		}
	}
	defer func() {
		if recover() == nil {
			t.Error("AddReason with an unknown verdict did not panic")
		}
	}()
	r.AddReason("fine", "x", "y")
}

// tstCheckViews renders the model in a few poses at 160×120 and returns
// views whose chosen hypothesis is the true pose, except the last, whose
// hypothesis is turned 40° about the optical axis.
func tstCheckViews(t testing.TB, m *mesh.Mesh, n int) []CheckView {
	t.Helper()
	intr := mesh.Intrinsics{Width: 160, Height: 120, Fx: 131.25, Fy: 131.25, Cx: 79.5, Cy: 59.5}
	r, err := render.NewRenderer(intr)
	if err != nil {
		t.Fatal(err)
	}
	var views []CheckView
	for i := 0; i < n; i++ {
		camToWorld := tstLookAt(t, r3.Vec{X: 0.25 * math.Cos(float64(i)), Y: 0.25 * math.Sin(float64(i)), Z: 0.15}, r3.Vec{Z: 0.015}, r3.Vec{Z: 1})
		truth := camToWorld.Inv()
		fr, err := r.Render([]render.Object{{Mesh: m, ModelToCam: truth, Color: mesh.RGB{R: 150, G: 150, B: 160}}}, render.DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		v := CheckView{Image: fr.Color, Intr: intr, ModelToCam: truth, Correct: true, Label: "score 0.9"}
		if i == n-1 {
			v.ModelToCam = mesh.Pose{R: mesh.RotationFromAxisAngle(r3.Vec{Z: 1}, 40*math.Pi/180), T: r3.Vec{}}.Mul(truth)
			v.Correct = false
			v.Label = "score 0.7"
		}
		views = append(views, v)
	}
	return views
}

// tstFullReport builds a check report with every section filled.
func tstFullReport(t testing.TB) (*Report, ReportInputs) {
	t.Helper()
	model, _ := tstPart(t, "bracket", 0.002)
	cov, err := ComputeCoverage(context.Background(), model, tstSmallCamera(), tstHemisphere(t, r3.Vec{Z: 0.02}, 0.35, 4), nil, DefaultCoverageOptions())
	if err != nil {
		t.Fatal(err)
	}
	ref := tstBox(0.04, 0.03, 0.02, 2)
	scan := ref.Clone()
	for i := range scan.Vertices {
		scan.Vertices[i] = r3.Scale(1.02, scan.Vertices[i])
	}
	copt := DefaultCompareOptions()
	copt.Align = AlignNone
	cmp, err := Compare(scan, ref, copt)
	if err != nil {
		t.Fatal(err)
	}
	r := NewReport("bracket <&> \"test\"", Tool{Name: "scanfold", Version: "0.0-test"})
	r.AddReason(VerdictReview, "color-breaks-symmetry", "the geometry has a half-turn symmetry that only the paint mark breaks")
	right, wrong := []float64{0.6, 0.7, 0.8, 0.9, 0.75}, []float64{0.2, 0.3, 0.55, 0.4}
	cal, err := Calibrate(right, wrong, DefaultCalibrationOptions())
	if err != nil {
		t.Fatal(err)
	}
	r.Scorers = []ScorerResult{
		NewScorerResult("depth inliers", 0.8, 10, cal, right, wrong),
		{Name: "point difference", Recall: 1, Views: 10, Threshold: 0.6, Margin: 0.1},
	}
	r.Symmetry = &SymmetrySummary{Geometry: []AxisSummary{{Axis: [3]float64{0, 0.7071, 0.7071}, Fold: 2}}, HasColor: true, ColorBreaks: true}
	r.Coverage = cov.Summary(5)
	r.Confusers = []Confuser{{View: 3, Scorer: "depth inliers", Score: 0.55, RightScore: 0.6, RotationDeg: 180, TranslationMM: 2, Note: "half turn about the bisector"}}
	r.Comparison = cmp
	r.Timings = []Timing{{Stage: "render", Seconds: 1.5}}
	r.Settings = []Setting{{Name: "threshold", Value: "2 mm"}}
	in := ReportInputs{Model: model, CoverageMesh: model, Coverage: cov, Views: tstCheckViews(t, model, 3)}
	return r, in
}

// The page must name the verdict, carry the safety caution, and every
// image and link must point to a file that was written (html/template
// executed without error is checked by WriteReport's error).
func TestWriteReport(t *testing.T) {
	r, in := tstFullReport(t)
	parent := t.TempDir()
	dir := filepath.Join(parent, "report")
	opt := DefaultPictureOptions()
	opt.Tile = 96
	if err := WriteReport(dir, r, in, opt); err != nil {
		t.Fatal(err)
	}
	page, err := os.ReadFile(filepath.Join(dir, "index.html"))
	if err != nil {
		t.Fatal(err)
	}
	text := html.UnescapeString(string(page))
	for _, want := range []string{"review", SafetyCaution, "ISO 10218-1", "ISO/TS 15066", "color-breaks-symmetry", r.Part} {
		if !strings.Contains(text, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	if strings.Contains(string(page), "<&>") {
		t.Error("part name not escaped in the page")
	}
	if strings.Contains(strings.ToLower(string(page)), "<script") || strings.Contains(string(page), "http://") || strings.Contains(string(page), "https://") {
		t.Error("page has a script or an outside reference")
	}
	refs := regexp.MustCompile(`(?:src|href)="([^"]+)"`).FindAllStringSubmatch(string(page), -1)
	imgs := 0
	for _, m := range refs {
		if strings.HasSuffix(m[1], ".png") {
			imgs++
			f, err := os.Open(filepath.Join(dir, m[1]))
			if err != nil {
				t.Errorf("page shows %s: %v", m[1], err)
				continue
			}
			if _, err := png.Decode(f); err != nil {
				t.Errorf("%s is not a PNG: %v", m[1], err)
			}
			f.Close()
		} else if _, err := os.Stat(filepath.Join(dir, m[1])); err != nil {
			t.Errorf("page links %s: %v", m[1], err)
		}
	}
	// model, coverage, views, one histogram (the second scorer has no
	// scores), deviation.
	if imgs != 5 || len(r.Pictures) != 5 {
		t.Errorf("%d images on the page, %d pictures recorded, want 5", imgs, len(r.Pictures))
	}
	data, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	var back Report
	if err := json.Unmarshal(data, &back); err != nil {
		t.Fatal(err)
	}
	if back.Verdict != VerdictReview || back.Safety != SafetyCaution || back.Comparison == nil || back.Coverage == nil || len(back.Pictures) != 5 {
		t.Errorf("JSON round trip: verdict %q, comparison %v, coverage %v, %d pictures", back.Verdict, back.Comparison != nil, back.Coverage != nil, len(back.Pictures))
	}

	// Writing again replaces the folder whole and leaves nothing beside it.
	r.Scorers = r.Scorers[1:]
	if err := WriteReport(dir, r, ReportInputs{}, opt); err != nil {
		t.Fatal(err)
	}
	entries, _ := os.ReadDir(parent)
	if len(entries) != 1 || entries[0].Name() != "report" {
		t.Errorf("after replacing: %v beside the report", entries)
	}
	if _, err := os.Stat(filepath.Join(dir, "views.png")); err == nil {
		t.Error("old picture survived the replacement")
	}
	// A report that fails validation writes nothing and leaves nothing.
	r.Safety = ""
	if err := WriteReport(filepath.Join(parent, "bad"), r, in, opt); err == nil {
		t.Error("invalid report written")
	}
	entries, _ = os.ReadDir(parent)
	if len(entries) != 1 {
		t.Errorf("after a refused report: %v", entries)
	}
}

// A picture that cannot be drawn (a contact-sheet view with a broken
// pose) fails the write and leaves the old report untouched.
func TestWriteReportFailureKeepsOld(t *testing.T) {
	parent := t.TempDir()
	dir := filepath.Join(parent, "report")
	r := NewReport("box", Tool{Name: "scanfold", Version: "test"})
	opt := DefaultPictureOptions()
	opt.Tile = 64
	if err := WriteReport(dir, r, ReportInputs{}, opt); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadFile(filepath.Join(dir, "index.html"))
	box := tstBox(0.04, 0.03, 0.02, 1)
	views := []CheckView{{Intr: tstSmallCamera(), Model: box, ModelToCam: mesh.Pose{}}}
	if err := WriteReport(dir, r, ReportInputs{Model: box, Views: views}, opt); err == nil {
		t.Fatal("broken view written")
	}
	after, _ := os.ReadFile(filepath.Join(dir, "index.html"))
	if !bytes.Equal(before, after) {
		t.Error("failed write changed the old report")
	}
	entries, _ := os.ReadDir(parent)
	if len(entries) != 1 {
		t.Errorf("after a failed write: %v", entries)
	}
}

func TestWriteCompareReport(t *testing.T) {
	ref := tstBox(0.04, 0.03, 0.02, 2)
	scan := ref.Transform(mesh.PoseFromAxisAngle(r3.Vec{Z: 1}, 0.3, r3.Vec{X: 0.01}))
	c, err := Compare(scan, ref, DefaultCompareOptions())
	if err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(t.TempDir(), "cmp")
	opt := DefaultPictureOptions()
	opt.Tile = 96
	if err := WriteCompareReport(dir, c, "box", Tool{Name: "scanfold", Version: "test"}, opt); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{"index.html", "report.json", "deviation.png", "reference.png", "deviation.ply"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Errorf("%s: %v", f, err)
		}
	}
	page, _ := os.ReadFile(filepath.Join(dir, "index.html"))
	text := html.UnescapeString(string(page))
	if !strings.Contains(text, "F-score") || !strings.Contains(text, SafetyCaution) || strings.Contains(text, "Verdict:") {
		t.Error("compare page lacks its figures or the caution, or shows a verdict")
	}
	var back Report
	data, _ := os.ReadFile(filepath.Join(dir, "report.json"))
	if err := json.Unmarshal(data, &back); err != nil || back.Kind != ReportKindCompare || back.Verdict != "" || back.Comparison.FScore != c.FScore {
		t.Errorf("compare JSON: %v, kind %q verdict %q", err, back.Kind, back.Verdict)
	}
}

// tstCount counts the pixels of img within r close to c.
func tstCount(img image.Image, r image.Rectangle, c color.NRGBA) int {
	n := 0
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			p := color.NRGBAModel.Convert(img.At(x, y)).(color.NRGBA)
			if p == c {
				n++
			}
		}
	}
	return n
}

// The contact sheet draws the outline of the model under the chosen
// pose: for a right pose the outline lies on the silhouette of the
// image (the same render), for a wrong one it does not; right views get
// green, wrong ones red.
func TestContactSheet(t *testing.T) {
	model, _ := tstPart(t, "bracket", 0.002)
	views := tstCheckViews(t, model, 3)
	opt := DefaultPictureOptions()
	opt.Thumb, opt.Columns = 160, 3
	img, err := ContactSheet(views, model, opt)
	if err != nil {
		t.Fatal(err)
	}
	// Wrong first: slot 0 holds view 2 (wrong), slots 1 and 2 the right
	// ones. Tiles start at pad 6, stride 166 px.
	tile := func(slot int) image.Rectangle {
		x0 := 6 + slot*166
		return image.Rect(x0, 6, x0+160, 6+120)
	}
	if g, r := tstCount(img, tile(0), picRight), tstCount(img, tile(0), picWrong); r < 50 || g != 0 {
		t.Errorf("wrong view: %d green, %d red outline pixels", g, r)
	}
	for s := 1; s <= 2; s++ {
		if g, r := tstCount(img, tile(s), picRight), tstCount(img, tile(s), picWrong); g < 50 || r != 0 {
			t.Errorf("right view in slot %d: %d green, %d red outline pixels", s, g, r)
		}
	}
	if _, err := ContactSheet(nil, model, opt); err == nil {
		t.Error("empty contact sheet: no error")
	}
}

func TestPictures(t *testing.T) {
	box := tstBox(0.04, 0.03, 0.02, 2)
	opt := DefaultPictureOptions()
	opt.Tile = 64
	img, err := SixSides(box, opt)
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() != 3*64 || b.Dy() != 2*64+28 {
		t.Errorf("six sides %v", b)
	}
	// Every tile shows the model: its centre pixel is not background.
	bg := toNRGBA(opt.Background)
	for i := 0; i < 6; i++ {
		x, y := (i%3)*64+32, (i/3)*(64+14)+14+32
		if img.NRGBAAt(x, y) == bg {
			t.Errorf("tile %d shows no model at its centre", i)
		}
	}
	h, err := ScoreHistogram(ScorerResult{Name: "s", Threshold: 0.5, RightScores: []float64{0.6, 0.9}, WrongScores: []float64{0.1}}, 320, 200)
	if err != nil {
		t.Fatal(err)
	}
	if b := h.Bounds(); b.Dx() != 320 || b.Dy() != 200 {
		t.Errorf("histogram %v, want 320×200", b)
	}
	if _, err := ScoreHistogram(ScorerResult{Name: "empty"}, 320, 200); err == nil {
		t.Error("histogram without scores: no error")
	}
	if CoverageColor(0, 5) != picUnseen || CoverageColor(1, 5) == picUnseen {
		t.Error("coverage colours")
	}
	if facing(r3.Vec{Z: -1}) != "down (-z)" || !strings.HasPrefix(facing(r3.Vec{X: 0.6, Y: 0.6, Z: 0.53}), "mixed") {
		t.Error("facing names")
	}
}

// BenchmarkWriteReport writes a full check report (pictures at the
// default sizes, eight check views).
func BenchmarkWriteReport(b *testing.B) {
	r, in := tstFullReport(b)
	in.Views = append(in.Views, tstCheckViews(b, in.Model, 5)...)
	dir := filepath.Join(b.TempDir(), "report")
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := WriteReport(dir, r, in, DefaultPictureOptions()); err != nil {
			b.Fatal(err)
		}
	}
}
