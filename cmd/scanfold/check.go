package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/urfave/cli/v2"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/onboard"
	"github.com/scanfold/scanfold/reconstruct"
	"github.com/scanfold/scanfold/validate"
)

func checkCommand() *cli.Command {
	d := validate.DefaultCheckOptions()
	return &cli.Command{
		Name:            "check",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "prove whether a part's model lets a PPF-based cell find it, and judge it ready, review or rescan",
		UsageText: "scanfold check MODEL --tables PART.ppf [--cloud CLOUD.ply] [--views 60] [--report DIR] [--seed S]\n" +
			"   [--reference CAD] [--sweep DIR [--poses POSES.json] [--model-frame world|part] [--frames 12]]\n" +
			"   [--confusers demo|none|A.ply,B.stl] [--support-z 0mm] [--resolution 1.5mm]",
		Description: "Renders the model in its resting poses on a table among clutter, with occluders and " +
			"structured-light noise, votes for it with its PPF tables in every view, and scores the hypotheses " +
			"with the inlier-count baseline and the point-difference scorer (depth, normal and HSV colour). " +
			"Reports each scorer's recall, the acceptance threshold the cell should use and its margin, the " +
			"part's symmetries, its openings, and, when given, how it fares in the sweep's own frames, how much " +
			"of it the sweep saw, how it compares with its drawing model, and which other parts the cell could " +
			"confuse it with. The verdict (ready, review or rescan) comes with its reasons.\n\n" +
			"The tables need the cloud they were built from: --cloud, or else the first of PART-cloud.ply, " +
			"PART.ply and cloud.ply beside PART.ppf that the tables were built from.\n\n" + validate.SafetyCaution,
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "tables", Usage: "the part's PPF table file (from 'scanfold tables')", Required: true, TakesFile: true},
			&cli.StringFlag{Name: "cloud", Usage: "the oriented cloud the tables were built from (default: PART-cloud.ply, PART.ply or cloud.ply beside PART.ppf)", TakesFile: true},
			&cli.StringFlag{Name: "name", Usage: "the part's name in the report (default: the model file's name)"},
			&cli.IntFlag{Name: "views", Value: d.Views, Usage: "synthetic views to render and vote in (0: only the checks that need none)"},
			&cli.Uint64Flag{Name: "seed", Value: d.Seed, Usage: "random seed; the same seed gives the same check"},
			&cli.StringFlag{Name: "report", Usage: "folder to write the report to (HTML, JSON, PNG pictures); replaced if it exists", TakesFile: true},
			&cli.StringFlag{Name: "reference", Usage: "the part's drawing model (PLY, STL or OBJ) to compare the model with", TakesFile: true},
			&cli.GenericFlag{Name: "reference-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the --reference file: 1mm for a CAD export in millimetres"},
			&cli.GenericFlag{Name: "mesh-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the MODEL file"},
			&cli.StringFlag{Name: "sweep", Usage: "the sweep folder the model was fused from: its frames are scored and its coverage counted", TakesFile: true},
			&cli.StringFlag{Name: "poses", Usage: "the sweep's camera poses (a scanfold.truth-poses JSON file, as a synthetic sweep's truth/poses.json); default: the poses the sweep itself records", TakesFile: true},
			&cli.StringFlag{Name: "model-frame", Value: "world", Usage: "frame of the MODEL file: world (the sweep's, as 'fuse' writes it) or part (placed in the sweep by the --poses file's part_to_world)"},
			&cli.IntFlag{Name: "frames", Value: d.MaxRealFrames, Usage: "sweep frames to score the model in (evenly chosen)"},
			&cli.StringFlag{Name: "confusers", Value: "demo", Usage: "other parts to test for confusion: demo (the demo bin), none, or mesh files separated by commas"},
			restsFlag(),
			&cli.GenericFlag{Name: "resolution", Value: &optionalLength{}, Usage: "resolution of the model's surface, such as the voxel size it was fused at (e.g. 1.5mm): a scanned surface's own noise, allowed for when its symmetries are tested (default: none, a model from a drawing)"},
			&cli.GenericFlag{Name: "support-z", Value: &optionalLength{}, Usage: "height along the model's z axis of the support the part stood on during its sweep (a model in its part frame: 0mm), to tell its resting face from holes"},
			&cli.IntFlag{Name: "workers", Usage: "views processed at once (0: one per CPU); the result does not depend on it"},
		},
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return errors.New("check takes one argument, the model's mesh file (PLY, STL or OBJ)")
			}
			return runCheck(c, c.Args().First())
		},
	}
}

// optionalLength is a length flag that remembers whether it was set.
type optionalLength struct {
	units.Length
	set bool
}

func (o *optionalLength) Set(s string) error {
	if err := o.Length.Set(s); err != nil {
		return err
	}
	o.set = true
	return nil
}

func (o *optionalLength) String() string {
	if !o.set {
		return ""
	}
	return o.Length.String()
}

// loadScaledMesh reads a mesh file and scales it by unit metres.
func loadScaledMesh(path string, unit float64) (*mesh.Mesh, error) {
	if !(unit > 0) || math.IsInf(unit, 0) {
		return nil, fmt.Errorf("unit %s: want a positive length", units.FormatLength(unit))
	}
	m, err := mesh.LoadMesh(path)
	if err != nil {
		return nil, err
	}
	if unit != 1 {
		for i, v := range m.Vertices {
			m.Vertices[i] = r3.Scale(unit, v)
		}
	}
	return m, nil
}

func runCheck(c *cli.Context, modelPath string) error {
	start := time.Now()
	model, err := loadScaledMesh(modelPath, c.Generic("mesh-unit").(*units.Length).Metres)
	if err != nil {
		return err
	}
	cloud, tables, err := loadTablesAndCloud(c.String("tables"), c.String("cloud"))
	if err != nil {
		return err
	}
	name := c.String("name")
	if name == "" {
		name = strings.TrimSuffix(filepath.Base(modelPath), filepath.Ext(modelPath))
	}
	in := validate.CheckInput{Name: name, Model: model, Tables: tables, Cloud: cloud}
	if sz := c.Generic("support-z").(*optionalLength); sz.set {
		in.SupportZ, in.SupportKnown = sz.Metres, true
	}
	if ref := c.String("reference"); ref != "" {
		if in.Reference, err = loadScaledMesh(ref, c.Generic("reference-unit").(*units.Length).Metres); err != nil {
			return err
		}
	}
	opt := validate.DefaultCheckOptions()
	opt.Views = c.Int("views")
	opt.Seed = c.Uint64("seed")
	opt.Workers = c.Int("workers")
	opt.MaxRealFrames = c.Int("frames")
	if c.String("rests") == onboard.RestsAsScanned {
		if !in.SupportKnown {
			return fmt.Errorf("--rests %s needs --support-z: where the part stood in its sweep", onboard.RestsAsScanned)
		}
		opt.RestsAsScanned = true
	}
	if r := c.Generic("resolution").(*optionalLength); r.set {
		if !(r.Metres >= 0) || r.Metres > 0.05 {
			return fmt.Errorf("--resolution %s: want a length from 0 to 50mm", units.FormatLength(r.Metres))
		}
		opt.Symmetry.Resolution = r.Metres
	}
	if opt.MaxRealFrames < 0 {
		return fmt.Errorf("--frames %d: want ≥ 0", opt.MaxRealFrames)
	}
	if err := checkConfusers(c, &in); err != nil {
		return err
	}
	if dir := c.String("sweep"); dir != "" {
		if err := checkSweep(c, dir, &in, opt.MaxRealFrames); err != nil {
			return err
		}
	}
	bars := newStageBars(c.App.ErrWriter)
	opt.Progress = bars.progress
	res, err := validate.Check(c.Context, in, opt)
	bars.finish()
	if err != nil {
		return err
	}
	report := res.Report(validate.Tool{Name: "scanfold", Version: Version})
	reportDir := c.String("report")
	if reportDir != "" {
		popt := validate.DefaultPictureOptions()
		if err := validate.WriteReport(reportDir, report, res.ReportInputs(popt), popt); err != nil {
			return err
		}
	}
	printCheck(c.App.Writer, res, reportDir, time.Since(start))
	return nil
}

// loadTablesAndCloud loads the table file with the cloud it was built
// from: cloudPath, or else the first of PART-cloud.ply, PART.ply and
// cloud.ply beside PART.ppf that exists and matches the tables.
func loadTablesAndCloud(tablePath, cloudPath string) (*mesh.Cloud, *features.Model, error) {
	if cloudPath != "" {
		cloud, err := mesh.LoadCloud(cloudPath)
		if err != nil {
			return nil, nil, err
		}
		tables, err := features.LoadTables(tablePath, cloud)
		return cloud, tables, err
	}
	base := strings.TrimSuffix(tablePath, filepath.Ext(tablePath))
	candidates := []string{base + "-cloud.ply", base + ".ply", filepath.Join(filepath.Dir(tablePath), "cloud.ply")}
	var tried []string
	for _, p := range candidates {
		cloud, err := mesh.LoadCloud(p)
		if err != nil {
			if !errors.Is(err, os.ErrNotExist) {
				tried = append(tried, fmt.Sprintf("%s (%v)", p, err))
			}
			continue
		}
		tables, err := features.LoadTables(tablePath, cloud)
		if err == nil {
			return cloud, tables, nil
		}
		if !errors.Is(err, features.ErrWrongCloud) {
			return nil, nil, err
		}
		tried = append(tried, p+" (not the cloud of these tables)")
	}
	msg := "none of " + strings.Join(candidates, ", ") + " exists"
	if len(tried) > 0 {
		msg = "tried " + strings.Join(tried, "; ")
	}
	return nil, nil, fmt.Errorf("%s needs the cloud it was built from: %s; give it with --cloud", tablePath, msg)
}

// checkConfusers fills in the other parts named by --confusers.
func checkConfusers(c *cli.Context, in *validate.CheckInput) error {
	switch v := strings.TrimSpace(c.String("confusers")); v {
	case "none", "":
	case "demo":
		list, err := validate.DemoConfusers(0, in.Name)
		if err != nil {
			return err
		}
		in.Confusers = list
	default:
		for _, f := range strings.Split(v, ",") {
			f = strings.TrimSpace(f)
			m, err := mesh.LoadMesh(f)
			if err != nil {
				return fmt.Errorf("--confusers: %w", err)
			}
			in.Confusers = append(in.Confusers, validate.NamedModel{Name: strings.TrimSuffix(filepath.Base(f), filepath.Ext(f)), Mesh: m})
		}
	}
	return nil
}

// checkSweep loads the sweep's poses and a sample of its frames for
// the real-frame check and the coverage.
func checkSweep(c *cli.Context, dir string, in *validate.CheckInput, nframes int) error {
	sw, err := reconstruct.LoadSweepWith(c.Context, dir, reconstruct.DefaultLoadOptions())
	if err != nil {
		return err
	}
	usable := sw.Usable()
	if len(usable) == 0 {
		return fmt.Errorf("%s: no usable frames", dir)
	}
	modelToWorld := mesh.Identity()
	var camToWorld []mesh.Pose // per usable frame
	if p := c.String("poses"); p != "" {
		tp, err := reconstruct.ReadTruthPoses(p)
		if err != nil {
			return err
		}
		if len(tp.CamToWorld) != sw.NumFrames() {
			return fmt.Errorf("%s has %d poses, the sweep %d frames", p, len(tp.CamToWorld), sw.NumFrames())
		}
		for _, i := range usable {
			camToWorld = append(camToWorld, tp.CamToWorld[i])
		}
		if c.String("model-frame") == "part" {
			modelToWorld = tp.PartToWorld
		}
	}
	switch c.String("model-frame") {
	case "world":
	case "part":
		if c.String("poses") == "" {
			return errors.New("--model-frame part needs --poses, whose part_to_world places the part in the sweep")
		}
	default:
		return fmt.Errorf("--model-frame %q: want world or part", c.String("model-frame"))
	}
	n := min(nframes, len(usable))
	wanted := map[int]bool{}
	for j := 0; j < n; j++ {
		wanted[j*len(usable)/n] = true
	}
	known := camToWorld != nil
	var intr mesh.Intrinsics
	for k, i := range usable {
		if known && !wanted[k] {
			continue
		}
		fr, err := sw.Frame(i)
		if err != nil {
			return err
		}
		intr = fr.Intr
		var pose mesh.Pose
		if known {
			pose = camToWorld[k]
		} else {
			if !fr.HasPose {
				return fmt.Errorf("%s: frame %d records no camera pose (a turntable sweep without a calibrated axis?): give the poses with --poses", dir, i)
			}
			pose = fr.CamToWorld
			camToWorld = append(camToWorld, pose)
		}
		if wanted[k] {
			in.Frames = append(in.Frames, validate.RealFrame{Index: i, Intr: fr.Intr, Depth: fr.Depth, Color: fr.Color, ModelToCam: pose.Inv().Mul(modelToWorld)})
		}
	}
	in.Sweep = &validate.SweepInput{Intr: intr, CamToWorld: camToWorld, ModelToWorld: modelToWorld}
	return nil
}

// stageBars draws one progress bar per stage of a check.
type stageBars struct {
	w      io.Writer
	stage  string
	bar    func(done, total int)
	finish func()
}

func newStageBars(w io.Writer) *stageBars {
	return &stageBars{w: w, finish: func() {}}
}

func (s *stageBars) progress(stage string, done, total int) {
	if stage != s.stage {
		s.finish()
		s.stage = stage
		s.bar, s.finish = progressFunc(s.w, stage)
	}
	s.bar(done, total)
}

func printCheck(w io.Writer, res *validate.CheckResult, reportDir string, elapsed time.Duration) {
	fmt.Fprintf(w, "check of %s: %s\n", res.Name, strings.ToUpper(string(res.Verdict)))
	for _, r := range res.Reasons {
		fmt.Fprintf(w, "  [%s] %s: %s\n", r.Verdict, r.Code, r.Message)
	}
	if n := len(res.Views); n > 0 {
		ratio := ""
		if res.Baseline.Recall > 0 {
			ratio = fmt.Sprintf(" (%.2f×)", res.Point.Recall/res.Baseline.Recall)
		}
		fmt.Fprintf(w, "  recall      point difference %.1f%%, inlier-count baseline %.1f%%%s, PPF votes %.1f%% over %d views\n",
			100*res.Point.Recall, 100*res.Baseline.Recall, ratio, 100*res.Votes.Recall, n)
		if cal := res.Point.Calibration; cal != nil {
			fmt.Fprintf(w, "  threshold   %.3f on the point-difference score: accepts %.1f%% of right poses, %.1f%% of wrong ones; margin %.3f\n",
				cal.Threshold, 100*cal.TrueAcceptRate, 100*cal.FalseAcceptRate, cal.Gap)
		}
	}
	if rf := res.Real; rf != nil {
		fmt.Fprintf(w, "  real frames found in %.0f%% of %d, colour differs on %.1f%%\n", 100*rf.Recall, len(rf.Frames), 100*rf.ColorMismatch)
	}
	if cv := res.Coverage; cv != nil {
		fmt.Fprintf(w, "  coverage    %.1f%% of the surface seen by %d frames\n", 100*cv.SeenFraction, cv.Frames)
	}
	if cm := res.Comparison; cm != nil {
		fmt.Fprintf(w, "  reference   F-score %.1f%% at %s, scale %.4f\n", 100*cm.FScore, units.FormatLength(cm.Threshold), cm.Scale)
	}
	if reportDir != "" {
		fmt.Fprintf(w, "  report      %s\n", filepath.Join(reportDir, "index.html"))
	}
	fmt.Fprintf(w, "  time        %.1f s\n", elapsed.Seconds())
	fmt.Fprintf(w, "%s\n", validate.SafetyCaution)
}
