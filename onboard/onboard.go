// Package onboard does the whole job for one part: it fuses a sweep into
// the part's coloured mesh (package reconstruct), moves it into its
// canonical part frame, samples the oriented cloud and builds the PPF
// tables (package features), checks the model by scoring synthetic
// renders and the sweep's own frames (package validate), optionally
// compares it with the part's drawing model, writes the report and files
// everything as a new revision in the local catalog (package catalog).
//
// A model judged rescan is filed too, marked so: the catalog keeps the
// evidence of what went wrong. Nothing is filed when a stage fails; the
// catalog is left as it was.
//
// Frames: the sweep's world frame is the camera frame of its first
// frame; the catalog stores the part in the canonical part frame of
// validate.CanonicalFrame and records PartToSweep, the transform back.
// Units are metres inside; reports print millimetres.
package onboard

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
	"github.com/scanfold/scanfold/validate"
)

// Options configures Onboard. Start from DefaultOptions.
type Options struct {
	// Fuse turns the sweep into the mesh.
	// DEFAULT: reconstruct.DefaultFuseOptions() with 1.5 mm voxels (the
	// resolution at which the fusion targets were measured)
	Fuse reconstruct.FuseOptions
	// Sample makes the oriented cloud the tables are built from.
	// DEFAULT: mesh.DefaultSampleOptions() (5 % of the diameter, Drost et
	// al. 2010)
	Sample mesh.SampleOptions
	// Tables builds the PPF tables.
	// DEFAULT: features.DefaultTableOptions()
	Tables features.TableOptions
	// Check checks the model; its Progress is set by Onboard.
	// DEFAULT: validate.DefaultCheckOptions()
	Check validate.CheckOptions
	// RealFrames is how many of the sweep's frames the check scores the
	// model against, evenly spread over the frames fused.
	// DEFAULT: 8
	RealFrames int
	// DemoConfusers uses the demo parts bin as the confusers when the
	// catalog holds no other part.
	// DEFAULT: true
	DemoConfusers bool
	// Confusers, when not nil, are the parts the check compares the part
	// with, instead of the catalog's other parts as they stand when the
	// check starts (DemoConfusers is then unused). A batch fixes them
	// once, so that a part's result does not depend on which other parts
	// happened to be filed before it. An entry named like the part
	// itself (letter case ignored) is left out.
	// DEFAULT: nil
	Confusers []validate.NamedModel
	// Reference is a drawing model (PLY, STL or OBJ) to compare the scan
	// with; "" for none. ReferenceUnit is the length of one of its units
	// in metres.
	// DEFAULT: "", 1
	Reference     string
	ReferenceUnit float64
	// ReportDir is where the report folder is written; "" means
	// scanfold-reports/NAME-rREV next to the catalog folder.
	// DEFAULT: ""
	ReportDir string
	// Pictures sizes the report's pictures.
	// DEFAULT: validate.DefaultPictureOptions()
	Pictures validate.PictureOptions
	// SkipFiled returns the revision already filed from the same sweep
	// and settings instead of onboarding again (batch resumption).
	// DEFAULT: false
	SkipFiled bool
	// ToolVersion is recorded in the provenance and the report.
	// DEFAULT: "dev"
	ToolVersion string
	// Progress, when set, is called as the stages advance, from one
	// goroutine at a time.
	Progress func(stage string, done, total int)
}

// DefaultOptions returns the documented defaults.
func DefaultOptions() Options {
	fo := reconstruct.DefaultFuseOptions()
	fo.TSDF.VoxelSize = 0.0015
	return Options{
		Fuse:          fo,
		Sample:        mesh.DefaultSampleOptions(),
		Tables:        features.DefaultTableOptions(),
		Check:         validate.DefaultCheckOptions(),
		RealFrames:    8,
		DemoConfusers: true,
		ReferenceUnit: 1,
		Pictures:      validate.DefaultPictureOptions(),
		ToolVersion:   "dev",
	}
}

// Result is what Onboard did.
type Result struct {
	// Part and Revision name what was filed; Skipped reports that the
	// same sweep and settings were already filed (SkipFiled) and nothing
	// new was done.
	Part     string
	Revision int
	Skipped  bool
	// Verdict and Reasons are the check's outcome.
	Verdict catalog.Verdict
	Reasons []validate.Reason
	// ReportDir holds index.html, report.json and the pictures.
	ReportDir string
	// InputHash is the SHA-256 of the sweep (SweepHash).
	InputHash string
	// Fuse is the fusion's report and Check the check's result (nil when
	// Skipped).
	Fuse  *reconstruct.FuseReport
	Check *validate.CheckResult
	// Stages lists the wall time of each stage, in order.
	Stages []catalog.StageTiming
}

// settings is what the provenance records of a run: every setting that
// changes the model, so that a batch can tell a run it already made.
type settings struct {
	Voxel        float64 `json:"voxel_m"`
	Strict       bool    `json:"strict"`
	Refine       bool    `json:"refine_turntable"`
	SampleFrac   float64 `json:"sample_spacing_fraction"`
	SampleStep   float64 `json:"sample_spacing_m"`
	DistanceStep float64 `json:"ppf_distance_step_fraction"`
	AngleBins    int     `json:"ppf_angle_bins"`
	Views        int     `json:"check_views"`
	Seed         uint64  `json:"check_seed"`
	RealFrames   int     `json:"real_frames"`
	Demo         bool    `json:"demo_confusers"`
	Rests        string  `json:"rests,omitempty"` // "as-scanned"; empty for any pose
	Reference    string  `json:"reference,omitempty"`
	RefUnit      float64 `json:"reference_unit_m,omitempty"`
	Tool         string  `json:"tool_version"`
}

// Onboard onboards the part whose sweep is in sweepDir under name into
// store: fuse, canonical frame, sample, tables, check (and compare),
// report, file. It returns what it filed. ctx cancels it between and
// within stages; a cancelled or failed run files nothing.
func Onboard(ctx context.Context, sweepDir, name string, store *catalog.Store, opt Options) (*Result, error) {
	if err := catalog.ValidateName(name); err != nil {
		return nil, err
	}
	res := &Result{Part: name}
	stage := func(s string, since time.Time) {
		res.Stages = append(res.Stages, catalog.StageTiming{Stage: s, Seconds: time.Since(since).Seconds()})
	}
	progress := func(s string, done, total int) {
		if opt.Progress != nil {
			opt.Progress(s, done, total)
		}
	}

	t := time.Now()
	sw, err := reconstruct.LoadSweepWith(ctx, sweepDir, reconstruct.LoadOptions{Strict: opt.Fuse.Strict})
	if err != nil {
		return nil, err
	}
	if res.InputHash, err = SweepHash(sweepDir, sw.Manifest); err != nil {
		return nil, err
	}
	set := opt.settings()
	settingsJSON, err := json.Marshal(set)
	if err != nil {
		return nil, err
	}
	if opt.SkipFiled {
		sh, err := catalog.SettingsHash(settingsJSON)
		if err != nil {
			return nil, err
		}
		rev, err := store.FindByProvenance(name, res.InputHash, sh)
		if err == nil {
			res.Revision, res.Skipped, res.Verdict = rev.Number, true, rev.Verdict
			for _, m := range rev.Reasons {
				res.Reasons = append(res.Reasons, validate.Reason{Message: m})
			}
			return res, nil
		}
		if !errors.Is(err, catalog.ErrNotFound) {
			return nil, err
		}
	}
	stage("load", t)

	// Fuse.
	t = time.Now()
	fo := opt.Fuse
	fo.Progress = progress
	fused, err := reconstruct.Fuse(ctx, sw, fo)
	if err != nil {
		return nil, err
	}
	res.Fuse = &fused.Report
	stage("fuse", t)

	// Canonical frame, cloud, tables.
	t = time.Now()
	up := fused.Report.Support.Normal
	partToSweep, err := validate.CanonicalFrame(fused.Mesh, up)
	if err != nil {
		return nil, fmt.Errorf("onboard: %s: canonical frame: %w", name, err)
	}
	model := fused.Mesh.Transform(partToSweep.Inv())
	cloud, spacing, err := mesh.Sample(model, opt.Sample)
	if err != nil {
		return nil, fmt.Errorf("onboard: %s: sampling the cloud: %w", name, err)
	}
	progress("tables", 0, 1)
	to := opt.Tables
	to.Spacing = spacing
	tables, err := features.BuildTables(ctx, cloud, to)
	if err != nil {
		return nil, fmt.Errorf("onboard: %s: PPF tables: %w", name, err)
	}
	progress("tables", 1, 1)
	stage("tables", t)

	// Check.
	t = time.Now()
	in := validate.CheckInput{Name: name, Model: model, Tables: tables, Cloud: cloud}
	// The model ends where the fusion cut it, CropHeight above the
	// support: that is where the check must look for the face it stood on.
	in.SupportZ = validate.PlaneHeight(partToSweep, fused.Report.Support.Normal, fused.Report.Support.Offset-fused.Report.CropHeight)
	in.SupportKnown = true
	if in.Frames, err = realFrames(sw, &fused.Report, partToSweep, opt.RealFrames); err != nil {
		return nil, err
	}
	in.Sweep = sweepInput(sw, &fused.Report, partToSweep)
	if opt.Confusers != nil {
		for _, c := range opt.Confusers {
			if !strings.EqualFold(c.Name, name) {
				in.Confusers = append(in.Confusers, c)
			}
		}
	} else if in.Confusers, err = confusers(store, name, opt.DemoConfusers); err != nil {
		return nil, err
	}
	if opt.Reference != "" {
		ref, err := mesh.LoadMesh(opt.Reference)
		if err != nil {
			return nil, err
		}
		if opt.ReferenceUnit != 1 && opt.ReferenceUnit > 0 {
			for i, v := range ref.Vertices {
				ref.Vertices[i] = r3.Scale(opt.ReferenceUnit, v)
			}
		}
		in.Reference = ref
	}
	co := opt.Check
	co.Progress = progress
	if co.Symmetry.Resolution == 0 {
		// A fused surface carries noise of about its voxel size, which
		// a symmetric copy of it does not share (DetectSymmetry).
		co.Symmetry.Resolution = fused.Report.VoxelSize
	}
	checked, err := validate.Check(ctx, in, co)
	if err != nil {
		return nil, fmt.Errorf("onboard: %s: check: %w", name, err)
	}
	res.Check = checked
	res.Verdict = catalog.Verdict(checked.Verdict)
	res.Reasons = checked.Reasons
	stage("check", t)

	// Report into a temporary folder, then file, then move the report to
	// its place under the revision number it got.
	t = time.Now()
	tool := validate.Tool{Name: "scanfold", Version: opt.ToolVersion, GoVersion: runtime.Version()}
	report := checked.Report(tool)
	tmpRoot, err := os.MkdirTemp(reportsRoot(store, opt), ".report-*")
	if err != nil {
		return nil, fmt.Errorf("onboard: report folder: %w", err)
	}
	defer os.RemoveAll(tmpRoot)
	tmpReport := filepath.Join(tmpRoot, "report")
	if err := validate.WriteReport(tmpReport, report, checked.ReportInputs(opt.Pictures), opt.Pictures); err != nil {
		return nil, fmt.Errorf("onboard: %s: report: %w", name, err)
	}
	stage("report", t)

	t = time.Now()
	filing, err := opt.filing(name, model, cloud, tables, spacing, partToSweep, checked, res, settingsJSON, tmpReport)
	if err != nil {
		return nil, err
	}
	stage("file", t)
	filing.Provenance.Stages = res.Stages
	rev, err := store.File(ctx, filing)
	if err != nil {
		return nil, fmt.Errorf("onboard: %s: filing: %w", name, err)
	}
	res.Revision = rev.Number
	res.ReportDir = opt.ReportDir
	if res.ReportDir == "" {
		res.ReportDir = filepath.Join(reportsRoot(store, opt), fmt.Sprintf("%s-r%d", name, rev.Number))
	}
	if err := os.RemoveAll(res.ReportDir); err != nil {
		return res, fmt.Errorf("onboard: %s: filed as revision %d, but the report folder %s could not be replaced: %w", name, rev.Number, res.ReportDir, err)
	}
	if err := os.Rename(tmpReport, res.ReportDir); err != nil {
		return res, fmt.Errorf("onboard: %s: filed as revision %d, but the report could not be moved to %s: %w", name, rev.Number, res.ReportDir, err)
	}
	return res, nil
}

// reportsRoot returns the folder the report folders go in, creating it.
func reportsRoot(store *catalog.Store, opt Options) string {
	root := filepath.Join(filepath.Dir(store.Dir()), "scanfold-reports")
	if opt.ReportDir != "" {
		root = filepath.Dir(opt.ReportDir)
	}
	_ = os.MkdirAll(root, 0o755)
	return root
}

func (opt Options) settings() settings {
	return settings{
		Voxel: opt.Fuse.TSDF.VoxelSize, Strict: opt.Fuse.Strict, Refine: opt.Fuse.RefineTurntable,
		SampleFrac: opt.Sample.SpacingFraction, SampleStep: opt.Sample.Spacing,
		DistanceStep: opt.Tables.Params.DistanceStep, AngleBins: opt.Tables.Params.AngleBins,
		Views: opt.Check.Views, Seed: opt.Check.Seed, RealFrames: opt.RealFrames, Demo: opt.DemoConfusers,
		Reference: opt.Reference, RefUnit: opt.ReferenceUnit, Tool: opt.ToolVersion,
		Rests: map[bool]string{true: RestsAsScanned}[opt.Check.RestsAsScanned],
	}
}

// The ways a cell presents a part, as flags and settings name them.
const (
	RestsAny       = "any"
	RestsAsScanned = "as-scanned"
)

// filing assembles the catalog filing: the blobs (mesh and cloud as
// binary PLY in the part frame, the tables, the report files) and the
// metadata.
func (opt Options) filing(name string, model *mesh.Mesh, cloud *mesh.Cloud, tables *features.Model, spacing float64,
	partToSweep mesh.Pose, checked *validate.CheckResult, res *Result, settingsJSON []byte, reportDir string) (catalog.Filing, error) {
	blobs := map[string]catalog.BlobSource{}
	var buf bytes.Buffer
	if err := mesh.WritePLY(&buf, model, mesh.DefaultPLYOptions()); err != nil {
		return catalog.Filing{}, err
	}
	blobs["mesh"] = catalog.BlobSource{Data: append([]byte(nil), buf.Bytes()...)}
	buf.Reset()
	if err := mesh.WritePLYCloud(&buf, cloud, mesh.DefaultPLYOptions()); err != nil {
		return catalog.Filing{}, err
	}
	blobs["cloud"] = catalog.BlobSource{Data: append([]byte(nil), buf.Bytes()...)}
	blobs["tables"] = catalog.BlobSource{Data: features.MarshalTables(tables)}
	entries, err := os.ReadDir(reportDir)
	if err != nil {
		return catalog.Filing{}, err
	}
	for _, e := range entries {
		if e.IsDir() {
			continue
		}
		role := e.Name()
		if role == "index.html" {
			role = "report.html"
		}
		if catalog.ValidateRole(role) != nil {
			continue
		}
		blobs[role] = catalog.BlobSource{Path: filepath.Join(reportDir, e.Name())}
	}
	md := catalog.Metadata{
		Verdict:  res.Verdict,
		Diameter: checked.Diameter,
		Frame: catalog.Frame{
			Description: "origin at the area centroid of the fused surface; z up, along the normal of the support the part stood on; " +
				"x along the largest in-plane spread of the surface (sign toward its heavier third moment); y = z × x; metres",
			PartToSweep: partToSweep.Mat4(),
		},
		PPF: catalog.PPFParams{
			SamplingStep:  spacing,
			DistanceStep:  tables.DistanceStep(),
			AngleBins:     opt.Tables.Params.AngleBins,
			RefPointEvery: opt.Check.Vote.ReferenceStep,
		},
		Provenance: catalog.Provenance{
			InputHash:   res.InputHash,
			Settings:    settingsJSON,
			ToolVersion: opt.ToolVersion,
		},
	}
	for _, r := range checked.Reasons {
		md.Reasons = append(md.Reasons, fmt.Sprintf("%s: %s", r.Verdict, r.Message))
	}
	if c := checked.Point.Calibration; c != nil {
		md.Acceptance = catalog.Acceptance{Scorer: checked.Point.Name, Threshold: c.Threshold}
	}
	md.Symmetry = symmetryOf(checked.Symmetry)
	extra := map[string]any{
		"recall":              map[string]float64{"baseline": checked.Baseline.Recall, "point": checked.Point.Recall, "votes": checked.Votes.Recall},
		"point_score_weights": checked.PointOptions,
		"fuse":                res.Fuse,
	}
	if md.Extra, err = json.Marshal(extra); err != nil {
		return catalog.Filing{}, err
	}
	return catalog.Filing{Part: name, Blobs: blobs, Metadata: md}, nil
}

// symmetryOf describes the colour-aware symmetry (what the cell sees),
// falling back to the shape's when the model has no colour.
func symmetryOf(s *validate.SymmetryReport) catalog.Symmetry {
	if s == nil {
		return catalog.Symmetry{}
	}
	axes := s.Color
	what := "shape and colour"
	if !s.HasColor {
		axes, what = s.Geometry, "shape"
	}
	if len(axes) == 0 {
		d := "no rotational symmetry"
		if s.HasColor && len(s.Geometry) > 0 {
			d += fmt.Sprintf("; the print breaks the shape's %s", foldText(s.Geometry[0].Fold))
		}
		return catalog.Symmetry{Kind: "none", Description: d}
	}
	a := axes[0]
	out := catalog.Symmetry{Axis: [3]float64{a.Axis.X, a.Axis.Y, a.Axis.Z}}
	if a.Fold == 0 {
		out.Kind = "continuous"
	} else {
		out.Kind, out.Order = "discrete", a.Fold
	}
	out.Description = fmt.Sprintf("%s about (%.3f, %.3f, %.3f) by %s", foldText(a.Fold), a.Axis.X, a.Axis.Y, a.Axis.Z, what)
	if len(axes) > 1 {
		out.Description += fmt.Sprintf(", and %d more axes", len(axes)-1)
	}
	return out
}

func foldText(fold int) string {
	if fold == 0 {
		return "continuous rotational symmetry"
	}
	return fmt.Sprintf("%d-fold rotational symmetry", fold)
}

// realFrames loads up to n of the fused frames, evenly spread, with the
// pose at which the part stood in each.
func realFrames(sw *reconstruct.Sweep, rep *reconstruct.FuseReport, partToSweep mesh.Pose, n int) ([]validate.RealFrame, error) {
	used := usedFrames(rep)
	if n <= 0 || len(used) == 0 {
		return nil, nil
	}
	n = min(n, len(used))
	var out []validate.RealFrame
	for k := 0; k < n; k++ {
		i := used[k*len(used)/n]
		fr, err := sw.Frame(i)
		if err != nil {
			continue // skipped by the fusion already, or unreadable now
		}
		out = append(out, validate.RealFrame{
			Index: i, Intr: fr.Intr, Depth: fr.Depth, Color: fr.Color,
			ModelToCam: rep.CamToWorld[i].Inv().Mul(partToSweep),
		})
	}
	return out, nil
}

// usedFrames lists the frames the fusion placed, in order.
func usedFrames(rep *reconstruct.FuseReport) []int {
	skipped := map[int]bool{}
	for _, s := range rep.Skipped {
		skipped[s.Frame] = true
	}
	var out []int
	for i := range rep.CamToWorld {
		if !skipped[i] {
			out = append(out, i)
		}
	}
	return out
}

// sweepInput gives the check the sweep's cameras for the coverage.
func sweepInput(sw *reconstruct.Sweep, rep *reconstruct.FuseReport, partToSweep mesh.Pose) *validate.SweepInput {
	used := usedFrames(rep)
	in := &validate.SweepInput{Intr: sw.Manifest.Intrinsics, ModelToWorld: partToSweep}
	for _, i := range used {
		in.CamToWorld = append(in.CamToWorld, rep.CamToWorld[i])
	}
	return in
}

// CatalogConfusers returns what Onboard checks part name against when
// Options.Confusers is nil: the latest revision of every other part in
// the catalog whose model can be read, sorted by name, or the demo parts
// bin when the catalog holds none and demo is set.
func CatalogConfusers(store *catalog.Store, name string, demo bool) ([]validate.NamedModel, error) {
	return confusers(store, name, demo)
}

// confusers returns the latest revision of every other part in the
// catalog whose model can be read, or the demo parts bin when the
// catalog holds none and demo is set.
func confusers(store *catalog.Store, name string, demo bool) ([]validate.NamedModel, error) {
	list, err := store.List()
	if err != nil {
		return nil, err
	}
	var out []validate.NamedModel
	for _, p := range list {
		if strings.EqualFold(p.Name, name) {
			continue
		}
		rev, err := store.Show(p.Name, 0)
		if err != nil {
			continue
		}
		m, err := readBlob(store, rev, "mesh", mesh.ReadPLY)
		if err != nil {
			continue
		}
		nm := validate.NamedModel{Name: p.Name, Mesh: m, Threshold: rev.Acceptance.Threshold}
		if c, err := readBlob(store, rev, "cloud", mesh.ReadPLYCloud); err == nil {
			if t, err := readBlob(store, rev, "tables", func(r io.Reader) (*features.Model, error) { return features.ReadTables(r, c) }); err == nil {
				nm.Tables = t
			}
		}
		out = append(out, nm)
	}
	if len(out) == 0 && demo {
		return validate.DemoConfusers(0, name)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out, nil
}

// readBlob decodes a revision's blob of the given role.
func readBlob[T any](store *catalog.Store, rev *catalog.Revision, role string, decode func(io.Reader) (T, error)) (T, error) {
	var zero T
	ref, ok := rev.Blobs[role]
	if !ok {
		return zero, fmt.Errorf("onboard: %s@%d has no %s", rev.Part, rev.Number, role)
	}
	rc, err := store.OpenBlob(ref)
	if err != nil {
		return zero, err
	}
	defer rc.Close()
	return decode(rc)
}

// SweepHash returns the lowercase hex SHA-256 of a sweep: its manifest's
// bytes, then every frame's colour and depth file in manifest order,
// each preceded by its path and length, so that a changed, renamed or
// reordered file changes the hash.
func SweepHash(dir string, m *reconstruct.Manifest) (string, error) {
	h := sha256.New()
	add := func(rel string) error {
		f, err := os.Open(filepath.Join(dir, filepath.FromSlash(rel)))
		if err != nil {
			return fmt.Errorf("onboard: hashing %s: %w", rel, err)
		}
		defer f.Close()
		st, err := f.Stat()
		if err != nil {
			return err
		}
		fmt.Fprintf(h, "%s\x00%d\x00", rel, st.Size())
		_, err = io.Copy(h, f)
		return err
	}
	if err := add(reconstruct.ManifestName); err != nil {
		return "", err
	}
	for _, f := range m.Frames {
		if err := add(f.Color); err != nil {
			return "", err
		}
		if err := add(f.Depth); err != nil {
			return "", err
		}
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}
