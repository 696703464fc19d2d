package main

import (
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/validate"
)

func compareCommand() *cli.Command {
	d := validate.DefaultCompareOptions()
	return &cli.Command{
		Name:            "compare",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "tell how far a scan is from the part's drawing model",
		UsageText:       "scanfold compare SCAN --reference CAD [--threshold 2mm] [--report DIR] [--deviation OUT.ply] [--align auto|none] [--allow-scale]",
		Description: "Aligns the scan to the reference (PPF voting and principal axes for a coarse pose, then " +
			"point-to-plane ICP; the scale is estimated and flagged), samples both surfaces evenly and measures " +
			"precision, recall and F-score at the threshold (Knapitsch et al. 2017), the Chamfer distance (the mean " +
			"of the two directed mean distances), Hausdorff-95 and the signed deviation of every scan vertex. Both " +
			"meshes must be wound outward, as marching cubes and CAD exports are.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "reference", Usage: "the drawing model (PLY, STL or OBJ)", Required: true, TakesFile: true},
			&cli.GenericFlag{Name: "threshold", Value: &units.Length{Metres: d.Threshold}, Usage: "distance τ of precision, recall and F-score"},
			&cli.StringFlag{Name: "report", Usage: "folder to write the report to (HTML, JSON, PNG pictures, deviation PLY); replaced if it exists", TakesFile: true},
			&cli.StringFlag{Name: "deviation", Usage: "write the aligned scan with per-vertex deviation colours and values to this PLY file", TakesFile: true},
			&cli.StringFlag{Name: "align", Value: d.Align.String(), Usage: "auto (find the pose) or none (the scan is already in the reference's frame)"},
			&cli.BoolFlag{Name: "allow-scale", Usage: "correct the scan's size by the estimated scale before measuring (it is flagged either way)"},
			&cli.GenericFlag{Name: "mesh-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the SCAN file"},
			&cli.GenericFlag{Name: "reference-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the --reference file: 1mm for a CAD export in millimetres"},
			&cli.Uint64Flag{Name: "seed", Value: d.Seed, Usage: "random seed of the surface sampling"},
		},
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return errors.New("compare takes one argument, the scan's mesh file (PLY, STL or OBJ)")
			}
			return runCompare(c, c.Args().First())
		},
	}
}

func runCompare(c *cli.Context, scanPath string) error {
	start := time.Now()
	scan, err := loadScaledMesh(scanPath, c.Generic("mesh-unit").(*units.Length).Metres)
	if err != nil {
		return err
	}
	refPath := c.String("reference")
	ref, err := loadScaledMesh(refPath, c.Generic("reference-unit").(*units.Length).Metres)
	if err != nil {
		return err
	}
	opt := validate.DefaultCompareOptions()
	opt.Threshold = c.Generic("threshold").(*units.Length).Metres
	opt.AllowScale = c.Bool("allow-scale")
	opt.Seed = c.Uint64("seed")
	switch a := c.String("align"); a {
	case "auto":
		opt.Align = validate.AlignAuto
	case "none":
		opt.Align = validate.AlignNone
	default:
		return fmt.Errorf("--align %q: want auto or none", a)
	}
	cmp, err := validate.CompareContext(c.Context, scan, ref, opt)
	if err != nil {
		return fmt.Errorf("%s against %s: %w", scanPath, refPath, err)
	}
	if p := c.String("deviation"); p != "" {
		if err := cmp.SaveDeviationPLY(p); err != nil {
			return err
		}
	}
	reportDir := c.String("report")
	if reportDir != "" {
		name := strings.TrimSuffix(filepath.Base(scanPath), filepath.Ext(scanPath))
		if err := validate.WriteCompareReport(reportDir, cmp, name, validate.Tool{Name: "scanfold", Version: Version}, validate.DefaultPictureOptions()); err != nil {
			return err
		}
	}
	printCompare(c.App.Writer, cmp, scanPath, refPath, c.String("deviation"), reportDir, time.Since(start))
	return nil
}

func printCompare(w io.Writer, c *validate.Comparison, scan, ref, ply, reportDir string, elapsed time.Duration) {
	fmt.Fprintf(w, "%s against %s\n", scan, ref)
	fmt.Fprintf(w, "  F-score      %.1f%% at %s (precision %.1f%%, recall %.1f%%)\n", 100*c.FScore, units.FormatLength(c.Threshold), 100*c.Precision, 100*c.Recall)
	fmt.Fprintf(w, "  Chamfer      %s (mean of both directed means)\n", units.FormatLength(c.Chamfer))
	fmt.Fprintf(w, "  Hausdorff-95 %s\n", units.FormatLength(c.Hausdorff95))
	fmt.Fprintf(w, "  deviation    mean %s, RMS %s, max %s\n", units.FormatLength(c.MeanDeviation), units.FormatLength(c.RMSDeviation), units.FormatLength(c.MaxDeviation))
	flag := ""
	if c.ScaleFlagged {
		flag = fmt.Sprintf(" — off by more than ±%.1f%%", 100*c.ScaleTolerance)
	}
	if c.UnitHint != "" {
		flag += " (" + c.UnitHint + ")"
	}
	fmt.Fprintf(w, "  scale        %.4f%s\n", c.Scale, flag)
	if c.AlignMethod == "none" {
		fmt.Fprintf(w, "  alignment    none: the scan was taken to be in the reference's frame\n")
	} else {
		fmt.Fprintf(w, "  alignment    %s, then ICP: RMS %s, %.1f%% of points paired\n", c.AlignMethod, units.FormatLength(c.AlignRMS), 100*c.AlignInlierRatio)
	}
	for _, m := range c.Warnings {
		fmt.Fprintf(w, "  note         %s\n", m)
	}
	if ply != "" {
		fmt.Fprintf(w, "  deviation    %s\n", ply)
	}
	if reportDir != "" {
		fmt.Fprintf(w, "  report       %s\n", filepath.Join(reportDir, "index.html"))
	}
	fmt.Fprintf(w, "  time         %.1f s\n", elapsed.Seconds())
}
