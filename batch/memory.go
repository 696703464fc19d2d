package batch

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/scanfold/scanfold/onboard"
	"github.com/scanfold/scanfold/reconstruct"
)

// The memory estimate's terms, in bytes. They come from one measured
// onboarding per demo part (72-frame 640×480 turntable sweeps, default
// options, heap in use sampled every 20 ms with runtime.ReadMemStats):
// the peak is reached in the check, while the observations of its
// synthetic views are all held (until the scorer's weights are
// calibrated), and it grew by about 40 MiB from one to two workers
// inside the part. Measured peaks: 272–485 MiB with two workers, 375 MiB
// with one (the bracket); the estimate of the same runs is 524 and
// 479 MiB, an upper bound by design: the heap in use includes what the
// collector has not yet reclaimed, and a budget should err high.
const (
	// estBase covers the sweep's manifest, the fused volume and mesh,
	// the cloud, the tables, the confusers' models and the report
	// (fusion alone peaked at 45 MiB).
	estBase = 64 << 20
	// estViewPixel is per check view and per pixel of its camera: the
	// depth, normals, colour and masks kept for calibration, with the
	// collector's slack.
	estViewPixel = 20
	// estFramePixel is per sweep frame held decoded and per pixel:
	// float32 depth and 8-bit RGBA colour.
	estFramePixel = 8
	// estWorker is per goroutine working inside the part: render and
	// voting scratch, and two decoded frames in flight in the fusion.
	estWorker = 40 << 20
	// estHandheldPixel is per pixel of a handheld sweep's images, for
	// its fusion, which tracks the camera: the 120-frame 640×480
	// handheld bench sweep's Fuse peaked at 555–582 MiB of Go heap
	// (BenchmarkFuseHandheld, 2026-12-02), at 660 MiB (2 253 bytes a
	// pixel) when it prepared two frames ahead, and at 585–645 MiB once
	// tracking handed node frames to the pose graph (2026-12-03); the
	// estimate keeps the higher figure. It holds the frames' regions kept for the pose
	// graph (up to FuseOptions.KeepBytes), the graph's nodes, the scene
	// volume and the trackers' pyramids.
	estHandheldPixel = 2300
)

// EstimateMemory estimates the peak memory, in bytes, of onboarding
// the sweep in sweepDir with opt and workers goroutines inside the part
// (0: 1). It reads only the sweep's manifest (its image size); when that
// cannot be read, the part will fail early and the estimate is the
// fixed part alone; a handheld sweep adds its fusion's (estHandheldPixel).
// The estimate does not foresee a model much larger than the part (a
// fusion that kept the support): that part takes more.
func EstimateMemory(sweepDir string, opt onboard.Options, workers int) int64 {
	workers = max(workers, 1)
	est := int64(estBase)
	sc := opt.Check.Scene.Intrinsics
	est += int64(max(opt.Check.Views, 0)) * int64(sc.Width) * int64(sc.Height) * estViewPixel
	px, rig, err := sweepPixels(sweepDir)
	if err != nil {
		return est
	}
	est += int64(max(opt.RealFrames, 0)) * px * estFramePixel
	est += int64(workers) * (estWorker + 2*px*estFramePixel)
	if rig == reconstruct.RigHandheld {
		est += px * estHandheldPixel
	}
	return est
}

// sweepPixels reads the sweep's manifest and returns its image size in
// pixels and its rig.
func sweepPixels(dir string) (int64, reconstruct.Rig, error) {
	f, err := os.Open(filepath.Join(dir, reconstruct.ManifestName))
	if err != nil {
		return 0, "", err
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, reconstruct.MaxManifestBytes+1))
	if err != nil {
		return 0, "", err
	}
	if len(data) > reconstruct.MaxManifestBytes {
		return 0, "", fmt.Errorf("batch: %s is too large", reconstruct.ManifestName)
	}
	m, err := reconstruct.ParseManifest(data)
	if err != nil {
		return 0, "", err
	}
	return int64(m.Intrinsics.Width) * int64(m.Intrinsics.Height), m.Rig, nil
}
