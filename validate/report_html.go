package validate

import (
	"bytes"
	_ "embed"
	"errors"
	"fmt"
	"html/template"
	"image"
	"math"
	"os"
	"path/filepath"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

//go:embed templates/report.html.tmpl
var reportTemplateText string

var reportTemplate = template.Must(template.New("report").Funcs(template.FuncMap{
	"pct": func(x float64) string { return fmt.Sprintf("%.1f%%", 100*x) },
	"num": func(x float64) string { return fmt.Sprintf("%.4g", x) },
	"mm":  func(x float64) string { return fmt.Sprintf("%.3g mm", x*1e3) },
	"area": func(x float64) string {
		return fmt.Sprintf("%.0f mm²", x*1e6)
	},
	"vecmm":  vec3mm,
	"facing": facing,
	"bin": func(lo, hi int) string {
		switch {
		case hi < 0:
			return fmt.Sprintf("%d or more", lo)
		case hi == lo:
			return fmt.Sprint(lo)
		}
		return fmt.Sprintf("%d–%d", lo, hi)
	},
}).Parse(reportTemplateText))

// facing names the direction a unit normal points to, by its dominant
// axis when that holds at least cos 45° of it.
func facing(n r3.Vec) string {
	names := []struct {
		v    float64
		p, m string
	}{{n.X, "+x", "-x"}, {n.Y, "+y", "-y"}, {n.Z, "up (+z)", "down (-z)"}}
	best := 0
	for i := range names {
		if math.Abs(names[i].v) > math.Abs(names[best].v) {
			best = i
		}
	}
	if math.Abs(names[best].v) < math.Sqrt2/2 {
		return fmt.Sprintf("mixed (%.2f, %.2f, %.2f)", n.X, n.Y, n.Z)
	}
	if names[best].v > 0 {
		return names[best].p
	}
	return names[best].m
}

// ReportInputs are the meshes and views WriteReport draws its pictures
// from; any may be empty, and its picture is then left out.
type ReportInputs struct {
	// Model is the part model, drawn from six sides.
	Model *mesh.Mesh
	// CoverageMesh is the mesh the coverage was computed on, and
	// Coverage the result (with its per-face counts), for the coverage
	// map.
	CoverageMesh *mesh.Mesh
	Coverage     *Coverage
	// Views are the check views for the contact sheet, drawn with Model
	// unless a view names its own.
	Views []CheckView
	// Extra are further pictures, shown after the others (their File
	// names must not clash with the standard ones).
	Extra []ExtraPicture
}

// reportPage is what the template sees.
type reportPage struct {
	Title       string
	ShowVerdict bool
	R           *Report
	PLY         string
}

// WriteReport writes a self-contained report folder at dir: index.html
// (html/template; inline style, no scripts, no outside assets),
// report.json and the PNG pictures it shows — the model from six sides,
// the coverage map, the contact sheet of check views, a score histogram
// per scorer, and the deviation map when r holds a comparison with an
// aligned scan. It fills r.Pictures.
//
// The folder is built under a temporary name beside dir and renamed
// into place only when every file is written and synced; an existing
// folder at dir is first renamed aside and removed after. So dir is at
// every moment either the old complete report, absent for the instant
// between the two renames, or the new complete report, and an error or
// a crash never leaves a half report at dir (at worst a temporary
// folder beside it, named ".NAME.tmp-*" or ".NAME.old-*").
func WriteReport(dir string, r *Report, in ReportInputs, opt PictureOptions) error {
	if r == nil {
		return errors.New("validate: nil report")
	}
	if err := r.Validate(); err != nil {
		return err
	}
	if err := opt.validate(); err != nil {
		return err
	}
	title := "Model check: " + r.Part
	return writeReportDir(dir, r, title, r.Kind != ReportKindCompare, "", func(put func(name, title, caption string, img image.Image) error, tmp string) error {
		if in.Model != nil {
			img, err := SixSides(in.Model, opt)
			if err != nil {
				return fmt.Errorf("validate: model picture: %w", err)
			}
			if err := put("model.png", "The model from six sides", "Six views along the part frame's axes, lit from the camera.", img); err != nil {
				return err
			}
		}
		if in.CoverageMesh != nil && in.Coverage != nil {
			img, err := CoverageMap(in.CoverageMesh, in.Coverage, opt)
			if err != nil {
				return fmt.Errorf("validate: coverage picture: %w", err)
			}
			if err := put("coverage.png", "Coverage of the sweep",
				fmt.Sprintf("Each face coloured by the number of the %d frames that saw it; magenta was never seen.", in.Coverage.Frames), img); err != nil {
				return err
			}
		}
		if len(in.Views) > 0 {
			img, err := ContactSheet(in.Views, in.Model, opt)
			if err != nil {
				return fmt.Errorf("validate: contact sheet: %w", err)
			}
			wrong := 0
			for _, v := range in.Views {
				if !v.Correct {
					wrong++
				}
			}
			if err := put("views.png", "Check views",
				fmt.Sprintf("%d synthetic views (%d with a wrong pose chosen, shown first), each with the outline of the chosen pose: solid green right, dashed red wrong.", len(in.Views), wrong), img); err != nil {
				return err
			}
		}
		for i, s := range r.Scorers {
			if len(s.RightScores)+len(s.WrongScores) == 0 {
				continue
			}
			img, err := ScoreHistogram(s, 640, 360)
			if err != nil {
				return err
			}
			if err := put(fmt.Sprintf("scores-%d.png", i+1), "Scores: "+s.Name,
				"Scores of right and wrong hypotheses on shared bins, with the acceptance threshold dashed.", img); err != nil {
				return err
			}
		}
		if err := putComparison(put, r.Comparison, opt); err != nil {
			return err
		}
		for _, x := range in.Extra {
			if x.Image == nil {
				continue
			}
			if filepath.Base(x.File) != x.File || filepath.Ext(x.File) != ".png" {
				return fmt.Errorf("validate: extra picture file %q: want a plain .png file name", x.File)
			}
			if err := put(x.File, x.Title, x.Caption, x.Image); err != nil {
				return err
			}
		}
		return nil
	})
}

// putComparison adds the deviation map of c, when it has an aligned
// scan.
func putComparison(put func(name, title, caption string, img image.Image) error, c *Comparison, opt PictureOptions) error {
	if c == nil || c.AlignedScan == nil {
		return nil
	}
	img, err := DeviationMap(c, opt)
	if err != nil {
		return fmt.Errorf("validate: deviation picture: %w", err)
	}
	return put("deviation.png", "Deviation of the scan from the reference",
		fmt.Sprintf("The aligned scan from six sides, coloured by its signed distance to the reference surface (saturating at ±%.3g mm).", c.DeviationRange*1e3), img)
}

// WriteCompareReport writes the report folder of a comparison at dir,
// as WriteReport does: index.html, report.json, deviation.png (the
// aligned scan from six sides coloured by deviation, with a colour
// bar), reference.png (the reference from six sides) and deviation.ply
// (Comparison.SaveDeviationPLY). part names what was compared.
func WriteCompareReport(dir string, c *Comparison, part string, tool Tool, opt PictureOptions) error {
	if c == nil {
		return errors.New("validate: nil comparison")
	}
	if err := opt.validate(); err != nil {
		return err
	}
	r := NewReport(part, tool)
	r.Kind = ReportKindCompare
	r.Verdict = ""
	r.Comparison = c
	r.Timings = c.Timings
	if err := r.Validate(); err != nil {
		return err
	}
	return writeReportDir(dir, r, "Scan compared with reference: "+part, false, "deviation.ply",
		func(put func(name, title, caption string, img image.Image) error, tmp string) error {
			if err := putComparison(put, c, opt); err != nil {
				return err
			}
			if c.Reference != nil {
				img, err := SixSides(c.Reference, opt)
				if err != nil {
					return fmt.Errorf("validate: reference picture: %w", err)
				}
				if err := put("reference.png", "The reference from six sides", "The reference model in its own frame.", img); err != nil {
					return err
				}
			}
			if c.AlignedScan != nil {
				if err := c.SaveDeviationPLY(filepath.Join(tmp, "deviation.ply")); err != nil {
					return err
				}
			}
			return nil
		})
}

// writeReportDir builds the folder in a temporary directory beside dir
// (pictures through fill, then report.json and index.html) and moves it
// into place; see WriteReport.
func writeReportDir(dir string, r *Report, title string, showVerdict bool, ply string,
	fill func(put func(name, title, caption string, img image.Image) error, tmp string) error) (err error) {
	dir = filepath.Clean(dir)
	parent, base := filepath.Dir(dir), filepath.Base(dir)
	if base == "." || base == string(filepath.Separator) {
		return fmt.Errorf("validate: report folder %q has no name", dir)
	}
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	tmp, err := os.MkdirTemp(parent, "."+base+".tmp-*")
	if err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	defer func() {
		if err != nil {
			os.RemoveAll(tmp)
		}
	}()
	if err := os.Chmod(tmp, 0o755); err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	r.Pictures = nil
	put := func(name, ptitle, caption string, img image.Image) error {
		var buf bytes.Buffer
		if err := EncodePNG(&buf, img); err != nil {
			return err
		}
		if err := writeSynced(filepath.Join(tmp, name), buf.Bytes()); err != nil {
			return err
		}
		r.Pictures = append(r.Pictures, Picture{File: name, Title: ptitle, Caption: caption})
		return nil
	}
	if err := fill(put, tmp); err != nil {
		return err
	}
	var js bytes.Buffer
	if err := r.WriteJSON(&js); err != nil {
		return err
	}
	if err := writeSynced(filepath.Join(tmp, "report.json"), js.Bytes()); err != nil {
		return err
	}
	var page bytes.Buffer
	if err := reportTemplate.Execute(&page, reportPage{Title: title, ShowVerdict: showVerdict, R: r, PLY: ply}); err != nil {
		return fmt.Errorf("validate: report page: %w", err)
	}
	if err := writeSynced(filepath.Join(tmp, "index.html"), page.Bytes()); err != nil {
		return err
	}
	if err := syncDir(tmp); err != nil {
		return err
	}
	return replaceDir(tmp, dir)
}

// writeSynced writes data to a new file at path and syncs it.
func writeSynced(path string, data []byte) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return fmt.Errorf("validate: %w", err)
	}
	if _, err := f.Write(data); err != nil {
		f.Close()
		return fmt.Errorf("validate: %w", err)
	}
	if err := f.Sync(); err != nil {
		f.Close()
		return fmt.Errorf("validate: %w", err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("validate: %w", err)
	}
	return nil
}

func syncDir(path string) error {
	d, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("validate: %w", err)
	}
	defer d.Close()
	if err := d.Sync(); err != nil && !errors.Is(err, os.ErrInvalid) {
		return fmt.Errorf("validate: syncing %s: %w", path, err)
	}
	return nil
}

// replaceDir moves the complete folder tmp to dir: an existing dir is
// renamed aside first and removed once tmp is in place (restored if the
// second rename fails).
func replaceDir(tmp, dir string) error {
	if _, err := os.Lstat(dir); errors.Is(err, os.ErrNotExist) {
		if err := os.Rename(tmp, dir); err != nil {
			return fmt.Errorf("validate: report folder: %w", err)
		}
		return syncDir(filepath.Dir(dir))
	} else if err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	old, err := os.MkdirTemp(filepath.Dir(dir), "."+filepath.Base(dir)+".old-*")
	if err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	// MkdirTemp made an empty folder to pick a fresh name; os.Rename
	// does not replace a directory, so free the name first.
	if err := os.Remove(old); err != nil {
		return fmt.Errorf("validate: report folder: %w", err)
	}
	if err := os.Rename(dir, old); err != nil {
		os.Remove(old)
		return fmt.Errorf("validate: moving the old report aside: %w", err)
	}
	if err := os.Rename(tmp, dir); err != nil {
		if rerr := os.Rename(old, dir); rerr != nil {
			return fmt.Errorf("validate: report folder: %v (and restoring the old one: %v)", err, rerr)
		}
		return fmt.Errorf("validate: report folder: %w", err)
	}
	if err := syncDir(filepath.Dir(dir)); err != nil {
		return err
	}
	if err := os.RemoveAll(old); err != nil {
		return fmt.Errorf("validate: removing the old report %s: %w", old, err)
	}
	return nil
}
