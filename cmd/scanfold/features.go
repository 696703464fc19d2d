package main

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/urfave/cli/v2"
	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/features"
	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/mesh"
)

// spacingValue is a flag holding a sampling step either as a fraction
// of the diameter ("5%") or as a length ("2mm", "0.002").
type spacingValue struct {
	fraction float64 // > 0 when given as a percentage
	metres   float64 // > 0 when given as a length
}

func (s *spacingValue) Set(v string) error {
	v = strings.TrimSpace(v)
	if p, ok := strings.CutSuffix(v, "%"); ok {
		f, err := strconv.ParseFloat(strings.TrimSpace(p), 64)
		if err != nil || !(f > 0 && f <= 100) {
			return fmt.Errorf("spacing %q: want a percentage of the diameter in (0, 100]", v)
		}
		*s = spacingValue{fraction: f / 100}
		return nil
	}
	m, err := units.ParseLength(v)
	if err != nil {
		return fmt.Errorf("spacing %q: want a percentage of the diameter (5%%) or a length (2mm): %w", v, err)
	}
	if !(m > 0) {
		return fmt.Errorf("spacing %q: want a positive length", v)
	}
	*s = spacingValue{metres: m}
	return nil
}

func (s *spacingValue) String() string {
	if s.metres > 0 {
		return units.FormatLength(s.metres)
	}
	return strconv.FormatFloat(s.fraction*100, 'g', -1, 64) + "%"
}

func sampleCommand() *cli.Command {
	d := mesh.DefaultSampleOptions()
	return &cli.Command{
		Name:            "sample",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "sample a mesh into an even oriented point cloud for point-pair features",
		UsageText:       "scanfold sample MESH --out CLOUD.ply [--spacing 5%|2mm] [--normals interpolated|face] [--seed S]",
		Description: "Draws points uniformly over the mesh's area and thins them so that no two are closer than " +
			"the spacing (Poisson-disk), with normals from the mesh and colours from its vertex colours. " +
			"The default spacing, 5% of the diameter, is the sampling step of Drost et al. (2010).",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Usage: "point cloud to write (.ply)", Required: true, TakesFile: true},
			&cli.GenericFlag{Name: "spacing", Value: &spacingValue{fraction: d.SpacingFraction}, Usage: "smallest distance between points: a percentage of the mesh diameter (5%) or a length (2mm)"},
			&cli.StringFlag{Name: "normals", Value: "interpolated", Usage: "normal of each point: interpolated (from the vertex normals) or face (of the triangle it lies on)"},
			&cli.Uint64Flag{Name: "seed", Value: d.Seed, Usage: "random seed; the same seed writes the same cloud"},
			&cli.GenericFlag{Name: "mesh-unit", Value: &units.Length{Metres: 1}, Usage: "length of one unit of the mesh file: 1mm for a file in millimetres, 1m for metres"},
		},
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return errors.New("sample takes one argument, the mesh file (PLY, STL or OBJ)")
			}
			in := c.Args().First()
			m, err := mesh.LoadMesh(in)
			if err != nil {
				return err
			}
			if u := c.Generic("mesh-unit").(*units.Length).Metres; u != 1 {
				if !(u > 0) || math.IsInf(u, 0) {
					return fmt.Errorf("--mesh-unit %s: want a positive length", units.FormatLength(u))
				}
				for i, v := range m.Vertices {
					m.Vertices[i] = r3.Scale(u, v)
				}
			}
			opt := mesh.DefaultSampleOptions()
			sp := c.Generic("spacing").(*spacingValue)
			opt.Spacing, opt.SpacingFraction = sp.metres, sp.fraction
			opt.Seed = c.Uint64("seed")
			switch c.String("normals") {
			case "interpolated":
				opt.Normals = mesh.NormalsInterpolated
			case "face":
				opt.Normals = mesh.NormalsFace
			default:
				return fmt.Errorf("--normals %q: want interpolated or face", c.String("normals"))
			}
			start := time.Now()
			cloud, spacing, err := mesh.Sample(m, opt)
			if err != nil {
				return fmt.Errorf("%s: %w", in, err)
			}
			if err := mesh.SaveCloud(c.String("out"), cloud); err != nil {
				return err
			}
			w := c.App.Writer
			fmt.Fprintf(w, "wrote %s\n", c.String("out"))
			fmt.Fprintf(w, "  points     %d, %s apart or more\n", len(cloud.Points), units.FormatLength(spacing))
			fmt.Fprintf(w, "  mesh       %s, %d triangles, diameter %s\n", in, len(m.Faces), units.FormatLength(m.Diameter()))
			fmt.Fprintf(w, "  time       %.2f s\n", time.Since(start).Seconds())
			return nil
		},
	}
}

func tablesCommand() *cli.Command {
	d := features.DefaultTableOptions()
	return &cli.Command{
		Name:            "tables",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "build the point-pair-feature tables of an oriented point cloud",
		UsageText:       "scanfold tables CLOUD.ply --out PART.ppf [--distance-step 5%] [--angle-bins 30] [--keep-planar]",
		Description: "Computes the point-pair feature of Drost et al. (2010) for every ordered pair of points of " +
			"the cloud (which needs normals: write it with 'scanfold sample'), quantised with a distance step " +
			"relative to the cloud's diameter and 2π/angle-bins for angles, and writes the tables in scanfold's " +
			"own checksummed format, bound to this cloud by its SHA-256.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Usage: "table file to write", Required: true, TakesFile: true},
			&cli.GenericFlag{Name: "distance-step", Value: &spacingValue{fraction: d.DistanceStep}, Usage: "distance quantisation step as a percentage of the cloud diameter"},
			&cli.IntFlag{Name: "angle-bins", Value: d.AngleBins, Usage: "angle bins over 360° (even, 4..64): 30 gives 12° steps"},
			&cli.BoolFlag{Name: "keep-planar", Usage: "also store pairs of points on one plane (left out by default: they dominate flat parts and cost voting time)"},
			&cli.GenericFlag{Name: "spacing", Value: &units.Length{}, Usage: "the cloud's sampling step, recorded in the table (0: the median nearest-neighbour distance)"},
			&cli.IntFlag{Name: "workers", Usage: "goroutines (0: one per CPU); the tables do not depend on it"},
		},
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return errors.New("tables takes one argument, the oriented point cloud (.ply)")
			}
			in := c.Args().First()
			cloud, err := mesh.LoadCloud(in)
			if err != nil {
				return err
			}
			if len(cloud.Normals) != len(cloud.Points) {
				return fmt.Errorf("%s has no normals: sample the mesh with 'scanfold sample', which writes them", in)
			}
			opt := features.DefaultTableOptions()
			step := c.Generic("distance-step").(*spacingValue)
			if step.metres > 0 {
				return fmt.Errorf("--distance-step %s: give it as a percentage of the diameter (5%%)", step)
			}
			opt.DistanceStep = step.fraction
			opt.AngleBins = c.Int("angle-bins")
			opt.SkipPlanar = !c.Bool("keep-planar")
			opt.Spacing = c.Generic("spacing").(*units.Length).Metres
			opt.Workers = c.Int("workers")
			start := time.Now()
			model, err := features.BuildTables(c.Context, cloud, opt)
			if err != nil {
				return fmt.Errorf("%s: %w", in, err)
			}
			if err := features.SaveTables(c.String("out"), model); err != nil {
				return err
			}
			w := c.App.Writer
			size := len(features.MarshalTables(model))
			fmt.Fprintf(w, "wrote %s\n", c.String("out"))
			fmt.Fprintf(w, "  cloud      %s, %d points, diameter %s, spacing %s\n", in, len(cloud.Points), units.FormatLength(model.Diameter), units.FormatLength(model.Spacing))
			fmt.Fprintf(w, "  tables     %d pairs, %d keys, step %s and %.4g°\n", model.Pairs(), model.Keys(), units.FormatLength(model.DistanceStep()), 360/float64(opt.AngleBins))
			fmt.Fprintf(w, "  size       %d bytes on disk (%.2f a pair), %d in memory\n", size, float64(size)/float64(max(model.Pairs(), 1)), model.MemoryBytes())
			fmt.Fprintf(w, "  time       %.2f s\n", time.Since(start).Seconds())
			return nil
		},
	}
}

// interspersed returns args with each command's positional arguments
// moved after its flags, so that "scanfold sample MESH --out C.ply"
// parses like "scanfold sample --out C.ply MESH" (the flag parser stops
// at the first argument that is not a flag). A flag's value is the next
// token unless the flag is boolean or written --name=value; "--" ends
// the flags. Commands without positional arguments are unaffected. A
// command with subcommands ("catalog show NAME --json") keeps its own
// flags before the subcommand, whose arguments are arranged in turn.
func interspersed(app *cli.App, args []string) []string {
	return intersperse(app.Commands, nil, args)
}

// intersperse does interspersed's work on args: args[0] (the program or
// the parent command), the parent's flags (parentFlags says which take
// a value), then one of cmds and its arguments.
func intersperse(cmds []*cli.Command, parentFlags []cli.Flag, args []string) []string {
	if len(args) < 2 {
		return args
	}
	parentBool := boolFlags(parentFlags)
	// The command name is the first token that is neither a flag nor the
	// value of a parent flag.
	ci := -1
	for i := 1; i < len(args); i++ {
		a := args[i]
		if !strings.HasPrefix(a, "-") {
			ci = i
			break
		}
		name := strings.TrimLeft(a, "-")
		if b, known := parentBool[name]; known && !b && !strings.Contains(name, "=") {
			i++ // skip the parent flag's value
		}
	}
	if ci < 0 {
		return args
	}
	var cmd *cli.Command
	for _, c := range cmds {
		if c.HasName(args[ci]) {
			cmd = c
		}
	}
	if cmd == nil {
		return args
	}
	if len(cmd.Subcommands) > 0 {
		return append(append([]string{}, args[:ci]...), intersperse(cmd.Subcommands, cmd.Flags, args[ci:])...)
	}
	isBool := boolFlags(cmd.Flags)
	var flags, pos []string
	rest := args[ci+1:]
	for i := 0; i < len(rest); i++ {
		a := rest[i]
		switch {
		case a == "--":
			pos = append(pos, rest[i+1:]...)
			i = len(rest)
		case strings.HasPrefix(a, "-") && a != "-":
			flags = append(flags, a)
			name := strings.TrimLeft(a, "-")
			if !strings.Contains(name, "=") && !isBool[name] && i+1 < len(rest) {
				flags = append(flags, rest[i+1])
				i++
			}
		default:
			pos = append(pos, a)
		}
	}
	out := append(append([]string{}, args[:ci+1]...), flags...)
	if len(pos) > 0 {
		out = append(out, "--")
	}
	return append(out, pos...)
}

// boolFlags maps every name of flags (and help, h) to whether the flag
// is boolean (takes no value).
func boolFlags(flags []cli.Flag) map[string]bool {
	isBool := map[string]bool{"help": true, "h": true}
	for _, f := range flags {
		_, b := f.(*cli.BoolFlag)
		for _, n := range f.Names() {
			isBool[n] = b
		}
	}
	return isBool
}
