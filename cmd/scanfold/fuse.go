package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/scanfold/scanfold/internal/units"
	"github.com/scanfold/scanfold/mesh"
	"github.com/scanfold/scanfold/reconstruct"
)

func fuseCommand() *cli.Command {
	d := reconstruct.DefaultFuseOptions()
	return &cli.Command{
		Name:            "fuse",
		OnUsageError:    usageError,
		HideHelpCommand: true,
		Usage:           "fuse a sweep into the part's coloured, cleaned mesh",
		UsageText:       "scanfold fuse SWEEP --out part.ply [--voxel 2mm] [--strict] [--refine] [--json report.json]",
		Description: "Finds the plate or table and the part on it, places every frame (a turntable by its plate " +
			"angle about the calibrated or estimated axis; a handheld camera by its recorded pose or by " +
			"frame-to-model tracking), integrates the region of interest into a sparse TSDF, extracts the " +
			"surface by marching cubes and keeps the part. The mesh is written in the sweep's world frame " +
			"(the camera frame of its first frame). Frames that cannot be used are skipped and listed, unless " +
			"--strict.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Usage: "mesh file to write (.ply, .stl or .obj)", Required: true, TakesFile: true},
			&cli.GenericFlag{Name: "voxel", Value: &units.Length{Metres: d.TSDF.VoxelSize}, Usage: "voxel size of the fused volume, e.g. 2mm or 0.0015"},
			&cli.BoolFlag{Name: "strict", Usage: "fail on any frame that cannot be used instead of skipping it"},
			&cli.BoolFlag{Name: "refine", Usage: "refine every turntable frame by ICP against the model so far (for plates whose angle slips)"},
			&cli.StringFlag{Name: "json", Usage: "also write the fusion report as JSON to this file", TakesFile: true},
			&cli.StringFlag{Name: "poses", Usage: "also write the camera pose found for every frame (the poses-file format 'check --poses' reads; skipped frames get the identity)", TakesFile: true},
		},
		Action: func(c *cli.Context) error {
			if c.Args().Len() != 1 {
				return fmt.Errorf("fuse takes one sweep folder, got %d arguments", c.Args().Len())
			}
			dir := c.Args().First()
			opt := reconstruct.DefaultFuseOptions()
			opt.TSDF.VoxelSize = c.Generic("voxel").(*units.Length).Metres
			opt.Strict = c.Bool("strict")
			opt.RefineTurntable = c.Bool("refine")
			start := time.Now()
			sw, err := reconstruct.LoadSweepWith(c.Context, dir, reconstruct.LoadOptions{Strict: opt.Strict})
			if err != nil {
				return err
			}
			progress, finish := progressFunc(c.App.ErrWriter, "fuse")
			opt.Progress = func(_ string, done, total int) { progress(done, total) }
			res, err := reconstruct.Fuse(c.Context, sw, opt)
			finish()
			if err != nil {
				return err
			}
			out := c.String("out")
			if err := mesh.SaveMesh(out, res.Mesh); err != nil {
				return err
			}
			if p := c.String("poses"); p != "" {
				tp := &reconstruct.TruthPoses{Rig: res.Report.Rig, CamToWorld: res.Report.CamToWorld, PartToWorld: mesh.Identity(), Axis: res.Report.Axis}
				if err := reconstruct.WriteTruthPoses(p, tp); err != nil {
					return err
				}
			}
			if js := c.String("json"); js != "" {
				if err := writeJSONFile(js, res.Report); err != nil {
					return err
				}
			}
			printFuseReport(c.App.Writer, dir, out, &res.Report, time.Since(start))
			return nil
		},
	}
}

// printFuseReport prints what Fuse did, for people.
func printFuseReport(w io.Writer, dir, out string, r *reconstruct.FuseReport, took time.Duration) {
	fmt.Fprintf(w, "fused %s (%s) into %s\n", dir, r.Rig, out)
	fmt.Fprintf(w, "  frames:     %d used of %d, %d skipped\n", r.FramesUsed, r.Frames, len(r.Skipped))
	for _, s := range r.Skipped {
		fmt.Fprintf(w, "    frame %d: %s\n", s.Frame, s.Reason)
	}
	if r.Axis != nil {
		fmt.Fprintf(w, "  axis:       %s, through (%.1f, %.1f, %.1f) mm along (%.3f, %.3f, %.3f)", r.AxisSource,
			r.Axis.Point.X*1000, r.Axis.Point.Y*1000, r.Axis.Point.Z*1000, r.Axis.Direction.X, r.Axis.Direction.Y, r.Axis.Direction.Z)
		switch r.AxisMethod {
		case "plate texture":
			fmt.Fprintf(w, " by the plate's texture (correlation %.2f, %.2f mm from the view pairs' estimate)", r.PlateCorrelation, r.AxisShift*1000)
		case "view pairs":
			fmt.Fprintf(w, " by the view pairs (fit residual %.2f mm; the plate's texture too weak to use)", r.AxisRMS*1000)
		}
		fmt.Fprintln(w)
	}
	if r.Refined > 0 {
		fmt.Fprintf(w, "  refined:    %d frames, mean shift %.2f mm\n", r.Refined, r.RefineMean*1000)
	}
	if r.GraphNodes > 0 {
		fmt.Fprintf(w, "  loop:       pose graph of %d views and %d links (%d dropped as inconsistent) moved the tracked cameras by up to %.2f mm\n",
			r.GraphNodes, r.GraphEdges, r.GraphDropped, r.GraphCorrection*1000)
	}
	fmt.Fprintf(w, "  voxels:     %s, %d blocks\n", units.FormatLength(r.VoxelSize), r.Blocks)
	fmt.Fprintf(w, "  mesh:       %d vertices, %d triangles (%d support triangles and %d floating pieces removed)\n",
		r.Vertices, r.Triangles, r.CropRemoved, r.Components)
	fmt.Fprintf(w, "  area:       %.1f cm²\n", r.Area*1e4)
	if r.Watertight {
		fmt.Fprintf(w, "  volume:     %.1f cm³ (watertight)\n", r.Volume*1e6)
	} else {
		fmt.Fprintf(w, "  watertight: no; open boundary %.0f mm (the unseen underside, where the part stood)\n", r.Boundary*1000)
	}
	var stages []string
	for _, k := range []string{"support", "integrate", "pose graph", "extract", "clean"} {
		if v, ok := r.Timings[k]; ok {
			stages = append(stages, k+" "+v)
		}
	}
	fmt.Fprintf(w, "  time:       %s (%s)\n", took.Round(time.Millisecond), strings.Join(stages, ", "))
}

// writeJSONFile writes v as indented JSON to path, through a temporary
// file renamed into place so that a crash leaves no half file.
func writeJSONFile(path string, v any) error {
	data, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return err
	}
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, append(data, '\n'), 0o644); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}
