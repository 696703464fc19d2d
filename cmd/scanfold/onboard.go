package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/catalog"
	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/mesh/parts"
	"github.com/scanfold/scanfold/onboard"
	"github.com/scanfold/scanfold/reconstruct"
)

// onboardFlags are the flags shared by onboard and batch.
func onboardFlags() []cli.Flag {
	d := onboard.DefaultOptions()
	return []cli.Flag{
		catalogFlag(),
		&cli.GenericFlag{Name: "voxel", Value: &units.Length{Metres: d.Fuse.TSDF.VoxelSize}, Usage: "voxel size of the fused volume, e.g. 2mm"},
		&cli.IntFlag{Name: "views", Value: d.Check.Views, Usage: "synthetic views the check scores"},
		&cli.Uint64Flag{Name: "seed", Value: d.Check.Seed, Usage: "seed of the check's scenes; the same sweep, settings and seed give the same model and verdict"},
		&cli.IntFlag{Name: "real-frames", Value: d.RealFrames, Usage: "frames of the sweep the model is also scored against"},
		&cli.BoolFlag{Name: "strict", Usage: "fail on any frame that cannot be used instead of skipping it"},
		&cli.BoolFlag{Name: "refine", Usage: "refine every turntable frame by ICP against the model so far"},
		restsFlag(),
		&cli.BoolFlag{Name: "demo-confusers", Value: d.DemoConfusers, Usage: "when the catalog holds no other part, check against the demo parts bin (--demo-confusers=false: against nothing)"},
	}
}

// onboardOptions maps the shared flags onto onboard.Options.
func onboardOptions(c *cli.Context) onboard.Options {
	opt := onboard.DefaultOptions()
	opt.Fuse.TSDF.VoxelSize = c.Generic("voxel").(*units.Length).Metres
	opt.Fuse.Strict = c.Bool("strict")
	opt.Fuse.RefineTurntable = c.Bool("refine")
	opt.Check.Views = c.Int("views")
	opt.Check.Seed = c.Uint64("seed")
	opt.RealFrames = c.Int("real-frames")
	opt.DemoConfusers = c.Bool("demo-confusers")
	opt.Check.RestsAsScanned = c.String("rests") == onboard.RestsAsScanned
	opt.ToolVersion = Version
	return opt
}

// restsFlag is --rests: how the cell presents the part.
func restsFlag() cli.Flag {
	return &cli.StringFlag{Name: "rests", Value: onboard.RestsAny,
		Usage: "how the part rests in the cell: any (any stable pose, as in a bin) or as-scanned (as it stood in the sweep: a tray, a fixture, a conveyor); the check's views and findings follow",
		Action: func(_ *cli.Context, v string) error {
			if v != onboard.RestsAny && v != onboard.RestsAsScanned {
				return fmt.Errorf("--rests %q: want %s or %s", v, onboard.RestsAny, onboard.RestsAsScanned)
			}
			return nil
		}}
}

func onboardCommand() *cli.Command {
	return &cli.Command{
		Name:            "onboard",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "fuse, sample, build tables, check and file one part from its sweep",
		UsageText:       "scanfold onboard SWEEP --name NAME [--reference CAD.stl] [--catalog DIR] [--views 60] [--report DIR]",
		Description: "Runs the whole job for one part: fuse the sweep, move the mesh into the part's canonical frame, " +
			"sample the oriented cloud, build the PPF tables, check the model on synthetic renders and on the sweep's " +
			"own frames (and against --reference), write the report and file everything as a new revision in the " +
			"catalog. A rescan verdict is filed too, marked so. A model that passes still needs a supervised, " +
			"reduced-speed trial in the cell, under the cell's risk assessment and local safety rules.",
		Flags: append([]cli.Flag{
			&cli.StringFlag{Name: "name", Usage: "the part's name in the catalog (letters, digits, '-', '_', '.')", Required: true},
			&cli.StringFlag{Name: "reference", Usage: "drawing model of the part (PLY, STL or OBJ) to compare the scan with", TakesFile: true},
			&cli.GenericFlag{Name: "reference-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the --reference file: 1mm for millimetres"},
			&cli.StringFlag{Name: "report", Usage: "folder for the report (default: scanfold-reports/NAME-rREV next to the catalog)", TakesFile: true},
		}, onboardFlags()...),
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return fmt.Errorf("onboard takes one sweep folder, got %d arguments", c.Args().Len())
			}
			store, err := openCatalog(c, true)
			if err != nil {
				return err
			}
			defer store.Close()
			opt := onboardOptions(c)
			opt.Reference = c.String("reference")
			opt.ReferenceUnit = c.Generic("reference-unit").(*units.Length).Metres
			opt.ReportDir = c.String("report")
			return runOnboard(c, store, c.Args().First(), c.String("name"), opt)
		},
	}
}

// runOnboard onboards one sweep with a progress bar per stage and prints
// the closing summary.
func runOnboard(c *cli.Context, store *catalog.Store, sweep, name string, opt onboard.Options) error {
	start := time.Now()
	progress, finish := stageProgress(c.App.ErrWriter)
	opt.Progress = progress
	res, err := onboard.Onboard(c.Context, sweep, name, store, opt)
	finish()
	if err != nil {
		return err
	}
	printOnboard(c.App.Writer, store, res, time.Since(start))
	return nil
}

// stageProgress draws one progress bar per stage on w (a terminal):
// when the stage changes, the previous bar is finished.
func stageProgress(w io.Writer) (progress func(stage string, done, total int), finish func()) {
	var current string
	var bar func(done, total int)
	var end func()
	progress = func(stage string, done, total int) {
		if stage != current {
			if end != nil {
				end()
			}
			current = stage
			bar, end = progressFunc(w, stage)
		}
		bar(done, total)
	}
	finish = func() {
		if end != nil {
			end()
		}
	}
	return progress, finish
}

// printOnboard prints what was filed, the verdict with its reasons, and
// where the report is.
func printOnboard(w io.Writer, store *catalog.Store, res *onboard.Result, took time.Duration) {
	ref := catalog.FormatRef(res.Part, res.Revision)
	if res.Skipped {
		fmt.Fprintf(w, "%s: already filed from this sweep with these settings; nothing to do\n", ref)
		fmt.Fprintf(w, "verdict: %s\n", res.Verdict)
		return
	}
	fmt.Fprintf(w, "filed %s in %s\n", ref, store.Dir())
	if r := res.Fuse; r != nil {
		fmt.Fprintf(w, "  fused:   %d of %d frames (%d skipped), %.1f cm², %d triangles\n", r.FramesUsed, r.Frames, len(r.Skipped), r.Area*1e4, r.Triangles)
	}
	if ch := res.Check; ch != nil {
		fmt.Fprintf(w, "  size:    diameter %s\n", units.FormatLength(ch.Diameter))
		if len(ch.Views) > 0 {
			fmt.Fprintf(w, "  check:   %d views; recall %.0f%% with the point-difference score, %.0f%% with the depth-inlier baseline\n",
				len(ch.Views), 100*ch.Point.Recall, 100*ch.Baseline.Recall)
			if cal := ch.Point.Calibration; cal != nil {
				fmt.Fprintf(w, "  accept:  point-difference score ≥ %.3f\n", cal.Threshold)
			}
		}
	}
	var stages []string
	for _, s := range res.Stages {
		stages = append(stages, fmt.Sprintf("%s %.1fs", s.Stage, s.Seconds))
	}
	fmt.Fprintf(w, "  time:    %s (%s)\n", took.Round(100*time.Millisecond), strings.Join(stages, ", "))
	fmt.Fprintf(w, "verdict: %s\n", strings.ToUpper(string(res.Verdict)))
	for _, r := range res.Reasons {
		fmt.Fprintf(w, "  - [%s] %s\n", r.Verdict, r.Message)
	}
	fmt.Fprintf(w, "report:  %s\n", filepath.Join(res.ReportDir, "index.html"))
	fmt.Fprintln(w, "A model that passes still needs a supervised, reduced-speed trial in the cell, under the cell's risk assessment and local safety rules.")
}

func demoCommand() *cli.Command {
	return &cli.Command{
		Name:            "demo",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "synthesise a demo sweep of a part and onboard it end to end",
		Description: "Writes a turntable sweep of a demo part from a machine shop's parts bin (default: the valve body) " +
			"into a new temporary folder, onboards it into the catalog (--catalog, $SCANFOLD_CATALOG or ./scanfold-catalog) " +
			"and prints the verdict and where the HTML report is.",
		Flags: append([]cli.Flag{
			&cli.StringFlag{Name: "part", Value: "valve", Usage: "demo part to scan: " + strings.Join(parts.Names(), ", ")},
			&cli.StringFlag{Name: "out", Usage: "folder to write the demo sweep to (default: a new temporary folder)", TakesFile: true},
			&cli.StringFlag{Name: "rig", Value: string(reconstruct.RigTurntable), Usage: "turntable or handheld"},
			&cli.IntFlag{Name: "frames", Value: 72, Usage: "frames of the demo sweep"},
		}, onboardFlags()...),
		Action: func(c *cli.Context) error {
			if c.Args().Len() > 0 {
				return fmt.Errorf("demo takes no arguments, got %q", c.Args().First())
			}
			out := c.String("out")
			if out == "" {
				tmp, err := os.MkdirTemp("", "scanfold-demo-*")
				if err != nil {
					return err
				}
				out = filepath.Join(tmp, "sweep")
			}
			part := c.String("part")
			m, err := reconstruct.SynthPartMesh(part, 0)
			if err != nil {
				return err
			}
			so := reconstruct.DefaultSynthOptions()
			so.Rig = reconstruct.Rig(c.String("rig"))
			so.Frames = c.Int("frames")
			so.PartName = part
			if err := runSynth(c, out, part, m, so); err != nil {
				return err
			}
			store, err := openCatalog(c, true)
			if err != nil {
				return err
			}
			defer store.Close()
			fmt.Fprintln(c.App.Writer)
			return runOnboard(c, store, out, part, onboardOptions(c))
		},
	}
}
