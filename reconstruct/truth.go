package reconstruct

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Ground-truth file names inside a synthetic sweep folder.
const (
	TruthDir       = "truth"
	TruthPartName  = "part.ply"
	TruthSeenName  = "seen.ply"
	TruthPosesName = "poses.json"
	// TruthPosesFormat is the "format" value of poses.json.
	TruthPosesFormat = "scanfold.truth-poses"
)

// TruthPoses is the content of truth/poses.json: what a synthetic
// sweep's frames really were, in the sweep's world frame (frame 0's
// camera, the part as it stood then).
type TruthPoses struct {
	// Rig of the sweep.
	Rig Rig
	// CamToWorld is every frame's true camera pose; frame 0's is the
	// identity.
	CamToWorld []mesh.Pose
	// PartToWorld places the part's own frame (as meshed: +z up,
	// resting on z = 0, footprint centred on the origin) in the world.
	PartToWorld mesh.Pose
	// Axis is the true turntable axis (pointing up from the plate's top
	// face, through its centre); nil for a handheld sweep.
	Axis *Axis
	// AnglesRad are the plate angles of a turntable sweep, radians,
	// right-handed about Axis.Direction; nil for a handheld sweep.
	AnglesRad []float64
}

type truthWire struct {
	Format      string       `json:"format"`
	Version     int          `json:"version"`
	Rig         string       `json:"rig"`
	PartToWorld []float64    `json:"part_to_world"`
	Axis        *axisWire    `json:"turntable_axis,omitempty"`
	Frames      []truthFrame `json:"frames"`
}

type truthFrame struct {
	CamToWorld   []float64 `json:"cam_to_world"`
	TurntableDeg *float64  `json:"turntable_deg,omitempty"`
}

// WriteTruthPoses writes t as JSON to path.
func WriteTruthPoses(path string, t *TruthPoses) error {
	w := truthWire{Format: TruthPosesFormat, Version: 1, Rig: string(t.Rig)}
	m := t.PartToWorld.Mat4()
	w.PartToWorld = m[:]
	if t.Axis != nil {
		w.Axis = &axisWire{
			Point:     []float64{t.Axis.Point.X, t.Axis.Point.Y, t.Axis.Point.Z},
			Direction: []float64{t.Axis.Direction.X, t.Axis.Direction.Y, t.Axis.Direction.Z},
		}
	}
	for i, p := range t.CamToWorld {
		m := p.Mat4()
		f := truthFrame{CamToWorld: m[:]}
		if t.AnglesRad != nil {
			d := t.AnglesRad[i] * 180 / math.Pi
			f.TurntableDeg = &d
		}
		w.Frames = append(w.Frames, f)
	}
	b, err := json.MarshalIndent(w, "", "  ")
	if err != nil {
		return fmt.Errorf("reconstruct: writing %s: %w", path, err)
	}
	if err := os.WriteFile(path, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("reconstruct: %w", err)
	}
	return nil
}

// ReadTruthPoses reads a synthetic sweep's truth/poses.json. Poses must
// be rigid within PoseTolerance; they are re-orthonormalised.
func ReadTruthPoses(path string) (*TruthPoses, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: %w", err)
	}
	if st.Size() > MaxManifestBytes {
		return nil, fmt.Errorf("reconstruct: %s: %d bytes, more than %d", path, st.Size(), MaxManifestBytes)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: %w", err)
	}
	name := filepath.Base(path)
	var w truthWire
	if err := decodeStrict(b, &w); err != nil {
		return nil, fmt.Errorf("reconstruct: %s: %v", name, err)
	}
	if w.Format != TruthPosesFormat || w.Version != 1 {
		return nil, fmt.Errorf("reconstruct: %s: format %q version %d, want %q version 1", name, w.Format, w.Version, TruthPosesFormat)
	}
	if len(w.Frames) == 0 || len(w.Frames) > MaxFrames {
		return nil, fmt.Errorf("reconstruct: %s: %d frames, want 1..%d", name, len(w.Frames), MaxFrames)
	}
	pose := func(field string, v []float64) (mesh.Pose, error) {
		if len(v) != 16 {
			return mesh.Pose{}, fmt.Errorf("reconstruct: %s: %s: %d numbers, want 16", name, field, len(v))
		}
		var a [16]float64
		copy(a[:], v)
		p, err := mesh.PoseFromMat4(a, PoseTolerance)
		if err != nil {
			return mesh.Pose{}, fmt.Errorf("reconstruct: %s: %s: %w", name, field, err)
		}
		return p.Orthonormalize(), nil
	}
	t := &TruthPoses{Rig: Rig(w.Rig)}
	if t.PartToWorld, err = pose("part_to_world", w.PartToWorld); err != nil {
		return nil, err
	}
	if w.Axis != nil {
		if len(w.Axis.Point) != 3 || len(w.Axis.Direction) != 3 {
			return nil, fmt.Errorf("reconstruct: %s: turntable_axis needs 3 numbers for point and direction", name)
		}
		t.Axis = &Axis{
			Point:     r3.Vec{X: w.Axis.Point[0], Y: w.Axis.Point[1], Z: w.Axis.Point[2]},
			Direction: mesh.Normalize(r3.Vec{X: w.Axis.Direction[0], Y: w.Axis.Direction[1], Z: w.Axis.Direction[2]}),
		}
	}
	for i, f := range w.Frames {
		p, err := pose(fmt.Sprintf("frames[%d].cam_to_world", i), f.CamToWorld)
		if err != nil {
			return nil, err
		}
		t.CamToWorld = append(t.CamToWorld, p)
		if f.TurntableDeg != nil {
			if t.AnglesRad == nil {
				t.AnglesRad = make([]float64, len(w.Frames))
			}
			t.AnglesRad[i] = *f.TurntableDeg * math.Pi / 180
		}
	}
	return t, nil
}

// writeTruthAndManifest writes truth/ and sweep.json into the
// temporary sweep folder and returns the report.
func (sy *synthesizer) writeTruthAndManifest(stats []frameStats, seen []bool) (*SynthReport, error) {
	sc, opt := sy.sc, sy.opt
	sToWorld := sc.camToS[0].Inv()
	partToWorld := sToWorld.Mul(sc.partToS)
	truth := &TruthPoses{Rig: opt.Rig, PartToWorld: partToWorld, CamToWorld: make([]mesh.Pose, opt.Frames)}
	var axis *Axis
	if opt.Rig == RigTurntable {
		axis = &Axis{Point: sToWorld.Apply(r3.Vec{}), Direction: sToWorld.Rotate(r3.Vec{Z: 1})}
		truth.Axis = axis
		truth.AnglesRad = append([]float64(nil), sc.angles...)
	}
	for i := range truth.CamToWorld {
		if opt.Rig == RigTurntable {
			// The part turned by angles[i] − angles[0] about the axis; see
			// TurntablePose.
			back := mesh.PoseFromAxisAngle(r3.Vec{Z: 1}, sc.angles[0]-sc.angles[i], r3.Vec{})
			truth.CamToWorld[i] = sToWorld.Mul(back).Mul(sc.camToS[i])
		} else {
			truth.CamToWorld[i] = sToWorld.Mul(sc.camToS[i])
		}
	}
	td := filepath.Join(sy.dir, TruthDir)
	if err := WriteTruthPoses(filepath.Join(td, TruthPosesName), truth); err != nil {
		return nil, err
	}
	whole := sy.part.Transform(partToWorld)
	if err := mesh.SaveMesh(filepath.Join(td, TruthPartName), whole); err != nil {
		return nil, fmt.Errorf("reconstruct: synth truth: %w", err)
	}
	seenMesh := subMesh(whole, seen)
	if err := mesh.SaveMesh(filepath.Join(td, TruthSeenName), seenMesh); err != nil {
		return nil, fmt.Errorf("reconstruct: synth truth: %w", err)
	}

	m := &Manifest{
		Version:    ManifestVersion,
		Rig:        opt.Rig,
		Intrinsics: opt.Intrinsics,
		DepthUnit:  opt.DepthUnit,
		Provenance: map[string]string{
			"device":   "simulated structured-light RGB-D camera",
			"software": "scanfold synth",
			"note":     fmt.Sprintf("synthetic %s sweep of %s, seed %d", opt.Rig, partLabel(opt.PartName), opt.Seed),
		},
	}
	if opt.Noise.MaxRange > 0 {
		m.DepthRange = DepthRange{Near: math.Max(opt.Noise.MinRange, 0.05), Far: math.Min(opt.Noise.MaxRange, 65535*opt.DepthUnit)}
	}
	if opt.Rig == RigTurntable {
		m.Turntable = &Turntable{AngleSign: 1}
		if opt.WriteAxis {
			m.Turntable.Axis = axis
		}
	}
	for i := 0; i < opt.Frames; i++ {
		e := FrameEntry{Color: framePath("color", i), Depth: framePath("depth", i)}
		t := float64(i) * opt.FrameInterval
		e.Time = &t
		if opt.Rig == RigTurntable {
			a := sc.angles[i]
			e.Angle = &a
		}
		m.Frames = append(m.Frames, e)
	}
	b, err := m.Encode()
	if err != nil {
		return nil, err
	}
	if err := os.WriteFile(filepath.Join(sy.dir, ManifestName), b, 0o644); err != nil {
		return nil, fmt.Errorf("reconstruct: synth: %w", err)
	}

	rep := &SynthReport{Frames: opt.Frames, Intrinsics: opt.Intrinsics, PartTriangles: len(sy.part.Faces),
		SeenTriangles: len(seenMesh.Faces), DepthMin: math.Inf(1), DepthMax: math.Inf(-1)}
	_, rep.PartSize, _ = partOffset(sy.part)
	px := float64(opt.Intrinsics.Width * opt.Intrinsics.Height)
	for _, st := range stats {
		rep.ValidFraction += float64(st.valid) / px / float64(opt.Frames)
		rep.PartFraction += float64(st.partPx) / px / float64(opt.Frames)
		if st.hasDepth {
			rep.DepthMin = math.Min(rep.DepthMin, st.depthMin)
			rep.DepthMax = math.Max(rep.DepthMax, st.depthMax)
		}
	}
	if math.IsInf(rep.DepthMin, 1) {
		rep.DepthMin, rep.DepthMax = 0, 0
	}
	return rep, nil
}

func partLabel(name string) string {
	if name == "" {
		return "a mesh"
	}
	return name
}

// subMesh keeps the faces marked in keep and the vertices they use.
func subMesh(m *mesh.Mesh, keep []bool) *mesh.Mesh {
	out := &mesh.Mesh{}
	remap := make([]int32, len(m.Vertices))
	for i := range remap {
		remap[i] = -1
	}
	for f, k := range keep {
		if !k {
			continue
		}
		var nf mesh.Face
		for c, v := range m.Faces[f] {
			if remap[v] < 0 {
				remap[v] = int32(len(out.Vertices))
				out.Vertices = append(out.Vertices, m.Vertices[v])
				if m.Normals != nil {
					out.Normals = append(out.Normals, m.Normals[v])
				}
				if m.Colors != nil {
					out.Colors = append(out.Colors, m.Colors[v])
				}
			}
			nf[c] = uint32(remap[v])
		}
		out.Faces = append(out.Faces, nf)
	}
	return out
}
