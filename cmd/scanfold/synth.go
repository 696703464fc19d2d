package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/mesh/parts"
	"github.com/scanfold/scanfold/mesh/render"
	"github.com/scanfold/scanfold/reconstruct"
)

// synthFlags are the flags shared by synth and demo.
func synthFlags() []cli.Flag {
	d := reconstruct.DefaultSynthOptions()
	return []cli.Flag{
		&cli.StringFlag{Name: "rig", Value: string(d.Rig), Usage: "how the camera moves: turntable (fixed camera, the part turning on a plate) or handheld (the camera circling the part on a table)"},
		&cli.IntFlag{Name: "frames", Value: d.Frames, Usage: "number of frames (a turntable turns 360°/frames between frames)"},
		&cli.Uint64Flag{Name: "seed", Value: d.Seed, Usage: "random seed; the same seed writes the same sweep"},
		&cli.GenericFlag{Name: "distance", Value: &units.Length{Metres: d.Distance}, Usage: "camera distance to the plate centre (turntable) or mean distance to the part (handheld), e.g. 0.5m or 450mm"},
		&cli.Float64Flag{Name: "elevation", Value: math.Round(d.Elevation*180/math.Pi*1e6) / 1e6, Usage: "how far the camera looks down on the support, in degrees"},
		&cli.BoolFlag{Name: "noise", Value: true, Usage: "simulate depth-sensor noise, dropouts and light changes (--noise=false for clean frames)"},
		&cli.IntFlag{Name: "width", Value: d.Intrinsics.Width, Usage: "image width in pixels (focal length scales with it: 525 px at 640)"},
		&cli.IntFlag{Name: "height", Value: d.Intrinsics.Height, Usage: "image height in pixels"},
		&cli.BoolFlag{Name: "axis", Usage: "write the true turntable axis into sweep.json as its calibration"},
		&cli.IntFlag{Name: "workers", Usage: "frames rendered at once (0: one per CPU)"},
	}
}

func synthCommand() *cli.Command {
	flags := append([]cli.Flag{
		&cli.StringFlag{Name: "part", Usage: "demo part to scan: " + strings.Join(parts.Names(), ", ")},
		&cli.StringFlag{Name: "mesh", Usage: "scan this mesh file instead of a demo part (PLY, STL or OBJ, +z up)", TakesFile: true},
		&cli.GenericFlag{Name: "mesh-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the --mesh file: 1mm for a file in millimetres, 1m for metres"},
		&cli.GenericFlag{Name: "spacing", Value: &units.Length{Metres: reconstruct.DefaultPartSpacing}, Usage: "lattice spacing at which a demo part is meshed"},
		&cli.StringFlag{Name: "out", Usage: "sweep folder to write (must not exist, or be empty)", Required: true, TakesFile: true},
		&cli.BoolFlag{Name: "force", Usage: "replace a sweep already at --out"},
	}, synthFlags()...)
	return &cli.Command{
		Name:            "synth",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "write a synthetic RGB-D sweep of a part, with its ground truth",
		UsageText:       "scanfold synth --part NAME | --mesh FILE --out DIR [--rig turntable|handheld] [--frames N] [--seed S] ...",
		Description: "Renders a part on a turntable plate or on a table, with background clutter, through a " +
			"simulated structured-light camera, and writes a sweep folder (sweep.json, colour and 16-bit depth " +
			"PNGs) plus truth/ (part.ply, seen.ply, poses.json) in the sweep's world frame. The folder appears " +
			"complete or not at all.",
		Flags: flags,
		Action: func(c *cli.Context) error {
			if c.Args().Len() > 0 {
				return fmt.Errorf("synth takes no arguments, got %q (did you forget a flag name?)", c.Args().First())
			}
			part, name, err := synthPart(c)
			if err != nil {
				return err
			}
			opt, err := synthOptions(c)
			if err != nil {
				return err
			}
			opt.PartName = name
			opt.Overwrite = c.Bool("force")
			return runSynth(c, c.String("out"), name, part, opt)
		},
	}
}

// synthPart loads the part named by --part or --mesh.
func synthPart(c *cli.Context) (*mesh.Mesh, string, error) {
	name, file := c.String("part"), c.String("mesh")
	switch {
	case name != "" && file != "":
		return nil, "", errors.New("give either --part or --mesh, not both")
	case name != "":
		spacing := c.Generic("spacing").(*units.Length).Metres
		if !(spacing >= 0.0001 && spacing <= 0.01) {
			return nil, "", fmt.Errorf("--spacing %s: want 0.1mm..10mm", units.FormatLength(spacing))
		}
		m, err := reconstruct.SynthPartMesh(name, spacing)
		return m, name, err
	case file != "":
		m, err := reconstruct.LoadPartMesh(file, c.Generic("mesh-unit").(*units.Length).Metres)
		return m, filepath.Base(file), err
	}
	return nil, "", fmt.Errorf("give a part to scan: --part NAME (%s) or --mesh FILE", strings.Join(parts.Names(), ", "))
}

// synthOptions maps the shared flags onto reconstruct.SynthOptions;
// the library checks the values.
func synthOptions(c *cli.Context) (reconstruct.SynthOptions, error) {
	opt := reconstruct.DefaultSynthOptions()
	opt.Rig = reconstruct.Rig(c.String("rig"))
	opt.Frames = c.Int("frames")
	opt.Seed = c.Uint64("seed")
	opt.Distance = c.Generic("distance").(*units.Length).Metres
	opt.Elevation = c.Float64("elevation") * math.Pi / 180
	opt.WriteAxis = c.Bool("axis")
	opt.Workers = c.Int("workers")
	if !c.Bool("noise") {
		opt.Noise = render.NoNoise()
	}
	w, h := c.Int("width"), c.Int("height")
	if w <= 0 || h <= 0 || w > mesh.MaxImageSide || h > mesh.MaxImageSide {
		return opt, fmt.Errorf("--width %d --height %d: want 1..%d pixels each", w, h, mesh.MaxImageSide)
	}
	f := 525 * float64(w) / 640
	opt.Intrinsics = mesh.Intrinsics{Width: w, Height: h, Fx: f, Fy: f, Cx: float64(w-1) / 2, Cy: float64(h-1) / 2}
	return opt, nil
}

func runSynth(c *cli.Context, out, name string, part *mesh.Mesh, opt reconstruct.SynthOptions) error {
	progress, finish := progressFunc(c.App.ErrWriter, "synth")
	opt.Progress = progress
	start := time.Now()
	rep, err := reconstruct.Synth(c.Context, out, part, opt)
	finish()
	if err != nil {
		return err
	}
	printSynthReport(c.App.Writer, rep, name, opt, time.Since(start))
	return nil
}

func printSynthReport(w io.Writer, rep *reconstruct.SynthReport, name string, opt reconstruct.SynthOptions, elapsed time.Duration) {
	k := rep.Intrinsics
	fmt.Fprintf(w, "wrote %s\n", rep.Dir)
	fmt.Fprintf(w, "  frames        %d × %d×%d, %s rig, seed %d\n", rep.Frames, k.Width, k.Height, opt.Rig, opt.Seed)
	fmt.Fprintf(w, "  valid depth   %.1f %% of pixels (the part: %.1f %%)\n", 100*rep.ValidFraction, 100*rep.PartFraction)
	fmt.Fprintf(w, "  depth range   %.0f – %.0f mm\n", rep.DepthMin*1e3, rep.DepthMax*1e3)
	s := rep.PartSize
	fmt.Fprintf(w, "  part          %s, %.1f × %.1f × %.1f mm, %d triangles (%d seen)\n", name, s.X*1e3, s.Y*1e3, s.Z*1e3, rep.PartTriangles, rep.SeenTriangles)
	fmt.Fprintf(w, "  truth         %s\n", filepath.Join(rep.Dir, reconstruct.TruthDir))
	fmt.Fprintf(w, "  time          %.1f s\n", elapsed.Seconds())
}
