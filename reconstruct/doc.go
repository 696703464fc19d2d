// Package reconstruct turns an RGB-D sweep of a part into a coloured
// mesh. This file specifies the sweep folder, the package's input; the
// loader (LoadSweep) and the synthetic sweep writer (Synth) implement
// it.
//
// # Sweep folder, format version 1
//
// A sweep folder holds a manifest, sweep.json, and the frames' images
// in any layout below the folder (the synthetic writer uses
// color/NNNNNN.png and depth/NNNNNN.png). Synthetic sweeps also carry
// a truth/ folder (see below) that no pipeline stage reads.
//
// The manifest is one JSON object. Field names are case-sensitive;
// unknown or repeated fields are errors, so that a misspelt field is
// never silently ignored. Units are SI (metres, seconds) except the
// turntable angle, which is in degrees because turntables report it so
// (radians in memory).
//
//	{
//	  "format": "scanfold.sweep",      required, exactly this
//	  "version": 1,                    required; other versions are unsupported
//	  "rig": "turntable",              required: "turntable" or "handheld"
//	  "intrinsics": {                  required, all six fields
//	    "width": 640, "height": 480,   pixels, 1..16384 each, at most 4096² in all
//	    "fx": 525, "fy": 525,          focal lengths in pixels, > 0
//	    "cx": 319.5, "cy": 239.5       principal point; centre of pixel (0,0) is (0,0)
//	  },
//	  "depth_unit_m": 0.001,           optional, DEFAULT 0.001; metres per depth count, in [1e-5, 0.01]
//	  "depth_range_m": {"near": 0.25, "far": 1.5},
//	                                   optional hint: the sensor's trusted range, 0 < near < far
//	  "turntable": {                   optional, turntable sweeps only
//	    "angle_direction": "ccw",      "ccw" (DEFAULT) or "cw": angles grow counter-clockwise
//	                                   or clockwise seen from above the plate
//	    "axis": {                      optional calibration, in the world frame (below)
//	      "point": [x, y, z],          any point on the rotation axis, metres
//	      "direction": [x, y, z]       pointing up, out of the plate's top face
//	    }
//	  },
//	  "provenance": {"device": "...", "operator": "...", "note": "..."},
//	                                   optional free-form strings (at most 64 keys)
//	  "frames": [                      required, 1..20000 entries, in capture order
//	    {
//	      "color": "color/000000.png", required: 8-bit PNG (RGB, RGBA, grey or paletted)
//	      "depth": "depth/000000.png", required: 16-bit grayscale PNG, counts of depth_unit_m
//	      "time_s": 0.0,               optional capture time, seconds
//	      "turntable_deg": 0.0,        turntable sweeps: the plate's angle, degrees
//	      "cam_to_world": [16 numbers] handheld sweeps, optional: the camera pose as a
//	                                   row-major 4×4 rigid transform, when a tracker knew it
//	    }
//	  ]
//	}
//
// Paths are slash-separated, relative to the sweep folder, and must
// stay inside it: absolute paths, ".." elements and backslashes are
// refused, and files are opened through os.Root so that a symbolic link
// cannot lead outside either. No image file may serve two frames or
// two roles.
//
// Colour and depth of a frame are registered: both have exactly the
// intrinsics' width and height, and pixel (i, j) of one sees the same
// ray as pixel (i, j) of the other. A depth value is the distance along
// the optical axis (z, not the ray length) in counts of depth_unit_m;
// 0 means no measurement.
//
// # Frames
//
// The world frame of a sweep is the camera frame of its first frame
// (x right, y down, z forward). For a turntable sweep the part is taken
// as it stood at frame 0: frame i's plate has turned by
// s·(θᵢ − θ₀) about the axis since then (s = +1 for "ccw", −1 for
// "cw"), and its CamToWorld pose is TurntablePose of that angle.
// A handheld sweep's cam_to_world poses are in this frame too, so frame
// 0's, when given, is the identity up to the tracker's noise.
//
// # What the loader checks
//
// Sweep-level problems make LoadSweep fail; the error names the file,
// the field (as a JSON path, "frames[3].depth") and, for JSON syntax
// and type errors, the line: an unreadable manifest, JSON syntax
// errors, unknown, misspelt or repeated fields, a wrong type, a missing
// or other format or version (ErrUnsupported for a newer version),
// invalid intrinsics, a depth unit or range out of bounds, no frames or
// more than MaxFrames, a path that is empty, absolute or leaves the
// folder, a path used twice, turntable fields in a handheld sweep or
// poses in a turntable sweep, a zero turntable axis.
//
// Per-frame problems set the frame aside with a recorded reason
// (Sweep.Skipped, a *FrameError naming the frame, the file and the
// field) unless LoadOptions.Strict makes them fatal: a missing or
// unreadable image, a file that is not a PNG, a truncated or corrupt
// PNG, an 8-bit or colour depth image, a 16-bit colour image, an image
// whose size differs from the intrinsics, a camera pose that is not 16
// finite numbers forming a rigid transform (within PoseTolerance), a
// non-finite time or angle, a turntable frame without an angle when no
// axis is calibrated. If no frame is left, LoadSweep fails with
// ErrNoFrames. PNG headers are checked at load time; pixel data when a
// frame is read, or at load time with LoadOptions.CheckPixels.
//
// Degenerate input, decided here: a turntable frame without an angle
// is usable when the axis is calibrated (its pose then has to be found
// by registration; Frame.HasPose is false); when frame 0 has no angle,
// no turntable frame gets a pose from its angle, since the world frame's
// reference angle is unknown.
//
// # Ground truth of synthetic sweeps
//
// Synth writes truth/ beside the manifest, in the sweep's world frame:
// part.ply (the whole part mesh), seen.ply (only the part's triangles
// that at least one frame saw) and poses.json (ReadTruthPoses): the
// true CamToWorld pose of every frame as 16 row-major numbers and, for
// a turntable, the true axis.
package reconstruct
