package reconstruct

import (
	"context"
	"fmt"
	"hash/fnv"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/spatial/r3"
)

func TestScratchHandheld(t *testing.T) {
	dirs := os.Getenv("HH")
	if dirs == "" {
		t.Skip("HH")
	}
	for _, dir := range strings.Split(dirs, ",") {
		sw, err := LoadSweep(dir)
		if err != nil {
			t.Fatal(err)
		}
		tp, err := ReadTruthPoses(filepath.Join(dir, TruthDir, TruthPosesName))
		if err != nil {
			t.Fatal(err)
		}
		t0 := time.Now()
		res, err := Fuse(context.Background(), sw, DefaultFuseOptions())
		if err != nil {
			t.Fatal(err)
		}
		el := time.Since(t0)
		r := res.Report
		wT, wR := worstCameraError(r, tp)
		h := fnv.New64a()
		sum, n := 0.0, 0
		for i, p := range r.CamToWorld {
			for _, row := range p.R {
				for _, v := range row {
					fmt.Fprint(h, math.Float64bits(v))
				}
			}
			fmt.Fprint(h, math.Float64bits(p.T.X), math.Float64bits(p.T.Y), math.Float64bits(p.T.Z))
			sum += r3.Norm(r3.Sub(p.T, tp.CamToWorld[i].T))
			n++
		}
		fmt.Printf("%s worst %.3f mm %.3f deg mean %.3f mm used %d hash %016x %.1fs\n", filepath.Base(dir), wT*1000, wR*180/math.Pi, sum/float64(n)*1000, r.FramesUsed, h.Sum64(), el.Seconds())
	}
}
