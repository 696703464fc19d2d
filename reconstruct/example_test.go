package reconstruct_test

import (
	"fmt"

	"github.com/scanfold/scanfold/reconstruct"
)

func ExampleParseManifest() {
	m, err := reconstruct.ParseManifest([]byte(`{
	  "format": "scanfold.sweep", "version": 1, "rig": "turntable",
	  "intrinsics": {"width": 640, "height": 480, "fx": 525, "fy": 525, "cx": 319.5, "cy": 239.5},
	  "frames": [
	    {"color": "color/0.png", "depth": "depth/0.png", "turntable_deg": 0},
	    {"color": "color/1.png", "depth": "depth/1.png", "turntable_deg": 90}
	  ]
	}`))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(m.Rig, len(m.Frames), "frames, depth unit", m.DepthUnit, "m")
	fmt.Printf("frame 1 angle %.4f rad\n", *m.Frames[1].Angle)
	// A frame without its angle is a per-frame problem: that frame would
	// be skipped, the rest of the sweep used.
	m.Frames[1].Angle = nil
	fmt.Println(m.FrameProblems()[1])

	_, err = reconstruct.ParseManifest([]byte(`{"format": "scanfold.sweep", "version": 2}`))
	fmt.Println(err)
	// Output:
	// turntable 2 frames, depth unit 0.001 m
	// frame 1 angle 1.5708 rad
	// reconstruct: frame 1 (turntable_deg): sweep.json: missing; without a calibrated turntable axis every frame needs its angle
	// reconstruct: sweep.json: version: format version 2 is not supported; this scanfold reads version 1
}
