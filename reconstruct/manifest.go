package reconstruct

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"path"
	"path/filepath"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"unicode/utf8"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Format constants of the sweep folder; see the package documentation
// for the full specification.
const (
	// ManifestName is the manifest's file name inside a sweep folder.
	ManifestName = "sweep.json"
	// ManifestFormat is the value of the manifest's "format" field.
	ManifestFormat = "scanfold.sweep"
	// ManifestVersion is the only format version this package reads and
	// writes.
	ManifestVersion = 1

	// DefaultDepthUnit is the depth unit when the manifest gives none:
	// 1 mm per count, the common practice for 16-bit depth PNGs.
	DefaultDepthUnit = 0.001
	// MinDepthUnit and MaxDepthUnit bound depth_unit_m. 10 µm per count
	// still spans 0.65 m in 16 bits; 1 cm per count is already coarser
	// than any RGB-D sensor worth scanning with.
	MinDepthUnit = 1e-5
	MaxDepthUnit = 0.01

	// MaxFrames bounds the number of frames of one sweep: eleven minutes
	// of a 30 Hz handheld sweep.
	MaxFrames = 20000
	// MaxPixels bounds width·height of a sweep's images (4096²), so that
	// one decoded frame never takes more than 64 MiB of depth.
	MaxPixels = 4096 * 4096
	// MaxManifestBytes bounds the manifest file's size.
	MaxManifestBytes = 64 << 20
	// MaxImageBytes bounds the size of one image file.
	MaxImageBytes = 256 << 20

	// PoseTolerance is how far a manifest pose's rotation block may
	// deviate from orthonormal (each entry of RᵀR − I) and its
	// determinant from +1. A rotation written with six significant
	// digits is off by about 5e-7 per entry, giving RᵀR errors near
	// 1e-6; 1e-5 accepts that and refuses any real scale or shear
	// (a 0.1 % scale already deviates by 2e-3).
	PoseTolerance = 1e-5

	maxProvenanceKeys  = 64
	maxProvenanceKey   = 64
	maxProvenanceValue = 4096
	maxPathLen         = 1024
)

// Rig is how the camera moved relative to the part.
type Rig string

// The two rigs.
const (
	// RigTurntable: a fixed camera, the part on a plate turning about a
	// fixed axis; every frame carries the plate's angle.
	RigTurntable Rig = "turntable"
	// RigHandheld: the part stands still and the camera moves freely;
	// frames may carry a camera pose when an external tracker knew it.
	RigHandheld Rig = "handheld"
)

// Manifest is a parsed sweep.json, in SI units (metres, radians).
type Manifest struct {
	// Version is the format version (ManifestVersion).
	Version int
	// Rig is RigTurntable or RigHandheld.
	Rig Rig
	// Intrinsics of the (registered) depth and colour images.
	Intrinsics mesh.Intrinsics
	// DepthUnit is metres per depth-image count. DEFAULT: 0.001.
	DepthUnit float64
	// DepthRange is the sensor's trusted depth range, a hint for later
	// stages; the zero value means unknown.
	DepthRange DepthRange
	// Turntable is the turntable description, nil for a handheld sweep.
	Turntable *Turntable
	// Provenance is free-form text about where the sweep came from; the
	// keys "device", "operator", "note", "software" and "created" are
	// conventional.
	Provenance map[string]string
	// Frames lists the frames in capture order.
	Frames []FrameEntry
}

// DepthRange is the sensor's trusted depth range in metres.
type DepthRange struct {
	Near, Far float64
}

// Known reports whether the range was given.
func (r DepthRange) Known() bool { return r.Far > 0 }

// Turntable describes the turntable of a turntable sweep.
type Turntable struct {
	// AngleSign is +1 when the recorded angles grow counter-clockwise
	// seen from above the plate (a right-handed turn about the upward
	// axis), −1 when they grow clockwise. DEFAULT: +1.
	AngleSign int
	// Axis is the calibrated rotation axis, nil when not calibrated.
	Axis *Axis
}

// Axis is a turntable's rotation axis in the sweep's world frame (the
// camera frame of frame 0), metres.
type Axis struct {
	// Point is any point on the axis.
	Point r3.Vec
	// Direction is the unit direction pointing up, out of the plate's
	// top face into the half-space where the part stands.
	Direction r3.Vec
}

// FrameEntry is one frame of the manifest, as written.
type FrameEntry struct {
	// Color and Depth are slash-separated paths relative to the sweep
	// folder.
	Color, Depth string
	// Time is the capture time in seconds, nil when unknown.
	Time *float64
	// Angle is the turntable angle in radians (degrees in the file),
	// nil when not recorded.
	Angle *float64
	// CamToWorld is the camera pose as 16 row-major numbers, nil when
	// not known. Kept as written; Sweep.Frame checks and converts it.
	CamToWorld []float64
}

// JSON wire types. Pointers tell a missing field from a zero one.
type manifestWire struct {
	Format      *string           `json:"format"`
	Version     *int              `json:"version"`
	Rig         *string           `json:"rig"`
	Intrinsics  *intrinsicsWire   `json:"intrinsics"`
	DepthUnitM  *float64          `json:"depth_unit_m,omitempty"`
	DepthRangeM *rangeWire        `json:"depth_range_m,omitempty"`
	Turntable   *turntableWire    `json:"turntable,omitempty"`
	Provenance  map[string]string `json:"provenance,omitempty"`
	Frames      []json.RawMessage `json:"frames"`
}

type intrinsicsWire struct {
	Width  *int     `json:"width"`
	Height *int     `json:"height"`
	Fx     *float64 `json:"fx"`
	Fy     *float64 `json:"fy"`
	Cx     *float64 `json:"cx"`
	Cy     *float64 `json:"cy"`
}

type rangeWire struct {
	Near *float64 `json:"near"`
	Far  *float64 `json:"far"`
}

type turntableWire struct {
	AngleDirection *string   `json:"angle_direction,omitempty"`
	Axis           *axisWire `json:"axis,omitempty"`
}

type axisWire struct {
	Point     []float64 `json:"point"`
	Direction []float64 `json:"direction"`
}

type frameWire struct {
	Color        *string       `json:"color"`
	Depth        *string       `json:"depth"`
	TimeS        *json.Number  `json:"time_s,omitempty"`
	TurntableDeg *json.Number  `json:"turntable_deg,omitempty"`
	CamToWorld   []json.Number `json:"cam_to_world,omitempty"`
}

// ParseManifest parses and checks a sweep.json. It returns every
// sweep-level problem it finds (up to 20, joined), each naming the
// field, with errors wrapping ErrInvalid or ErrUnsupported. Problems
// that concern one frame only (a non-rigid pose, a missing turntable
// angle) do not fail the parse; Manifest.FrameProblems reports them.
func ParseManifest(data []byte) (*Manifest, error) {
	if len(data) > MaxManifestBytes {
		return nil, &SweepError{File: ManifestName, Msg: fmt.Sprintf("%d bytes, more than the %d a manifest may have", len(data), MaxManifestBytes), Kind: ErrInvalid}
	}
	var w manifestWire
	if err := decodeStrict(data, &w); err != nil {
		return nil, jsonError(data, "", err)
	}
	p := &problems{file: ManifestName}
	checkKeys(data, p)
	if err := p.err(); err != nil {
		return nil, err
	}
	m := &Manifest{DepthUnit: DefaultDepthUnit}

	// Format and version first: for an unknown version nothing else is
	// meaningful.
	switch {
	case w.Format == nil:
		p.add("format", ErrInvalid, "missing; want %q", ManifestFormat)
	case *w.Format != ManifestFormat:
		p.add("format", ErrInvalid, "%q is not a scanfold sweep manifest; want %q", clip(*w.Format), ManifestFormat)
	}
	switch {
	case w.Version == nil:
		p.add("version", ErrInvalid, "missing; want %d", ManifestVersion)
	case *w.Version != ManifestVersion:
		p.add("version", ErrUnsupported, "format version %d is not supported; this scanfold reads version %d", *w.Version, ManifestVersion)
	}
	if err := p.err(); err != nil {
		return nil, err
	}
	m.Version = *w.Version

	switch {
	case w.Rig == nil:
		p.add("rig", ErrInvalid, "missing; want %q or %q", RigTurntable, RigHandheld)
	case *w.Rig == string(RigTurntable) || *w.Rig == string(RigHandheld):
		m.Rig = Rig(*w.Rig)
	default:
		p.add("rig", ErrInvalid, "%q is not a rig; want %q or %q", clip(*w.Rig), RigTurntable, RigHandheld)
	}

	parseIntrinsics(p, w.Intrinsics, m)

	if w.DepthUnitM != nil {
		u := *w.DepthUnitM
		if !(u >= MinDepthUnit && u <= MaxDepthUnit) {
			p.add("depth_unit_m", ErrInvalid, "%v m per count is outside [%g, %g]; depth PNGs in millimetres use 0.001", u, MinDepthUnit, MaxDepthUnit)
		} else {
			m.DepthUnit = u
		}
	}
	if r := w.DepthRangeM; r != nil {
		switch {
		case r.Near == nil || r.Far == nil:
			p.add("depth_range_m", ErrInvalid, "needs both near and far (metres)")
		case !(*r.Near > 0) || !(*r.Far > *r.Near):
			p.add("depth_range_m", ErrInvalid, "near %v m, far %v m: want 0 < near < far", *r.Near, *r.Far)
		case *r.Far > 65535*m.DepthUnit*1.0000001:
			p.add("depth_range_m.far", ErrInvalid, "%v m is beyond the deepest value a 16-bit depth image holds at %g m per count (%.3f m)", *r.Far, m.DepthUnit, 65535*m.DepthUnit)
		default:
			m.DepthRange = DepthRange{Near: *r.Near, Far: *r.Far}
		}
	}

	if w.Turntable != nil {
		if m.Rig == RigHandheld {
			p.add("turntable", ErrInvalid, "given for a handheld sweep; remove it or set rig to %q", RigTurntable)
		} else {
			m.Turntable = parseTurntable(p, w.Turntable)
		}
	} else if m.Rig == RigTurntable {
		m.Turntable = &Turntable{AngleSign: 1}
	}

	if len(w.Provenance) > maxProvenanceKeys {
		p.add("provenance", ErrInvalid, "%d entries, at most %d allowed", len(w.Provenance), maxProvenanceKeys)
	} else if len(w.Provenance) > 0 {
		keys := make([]string, 0, len(w.Provenance))
		for k := range w.Provenance {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		m.Provenance = make(map[string]string, len(keys))
		for _, k := range keys {
			v := w.Provenance[k]
			if k == "" || len(k) > maxProvenanceKey || len(v) > maxProvenanceValue {
				p.add("provenance."+clip(k), ErrInvalid, "keys must have 1..%d bytes and values at most %d", maxProvenanceKey, maxProvenanceValue)
				continue
			}
			m.Provenance[k] = v
		}
	}

	switch {
	case w.Frames == nil:
		p.add("frames", ErrInvalid, "missing; a sweep needs at least one frame")
	case len(w.Frames) == 0:
		p.add("frames", ErrInvalid, "empty; a sweep needs at least one frame")
	case len(w.Frames) > MaxFrames:
		p.add("frames", ErrInvalid, "%d frames, more than the %d a sweep may have; split the sweep", len(w.Frames), MaxFrames)
	default:
		m.Frames = make([]FrameEntry, len(w.Frames))
		seen := make(map[string]string, 2*len(w.Frames))
		for i, raw := range w.Frames {
			parseFrame(p, data, i, raw, m, seen)
		}
	}
	if err := p.err(); err != nil {
		return nil, err
	}
	return m, nil
}

func parseIntrinsics(p *problems, w *intrinsicsWire, m *Manifest) {
	if w == nil {
		p.add("intrinsics", ErrInvalid, "missing; want width, height, fx, fy, cx, cy")
		return
	}
	missing := func(name string, isNil bool) bool {
		if isNil {
			p.add("intrinsics."+name, ErrInvalid, "missing")
		}
		return isNil
	}
	bad := missing("width", w.Width == nil)
	bad = missing("height", w.Height == nil) || bad
	bad = missing("fx", w.Fx == nil) || bad
	bad = missing("fy", w.Fy == nil) || bad
	bad = missing("cx", w.Cx == nil) || bad
	bad = missing("cy", w.Cy == nil) || bad
	if bad {
		return
	}
	k := mesh.Intrinsics{Width: *w.Width, Height: *w.Height, Fx: *w.Fx, Fy: *w.Fy, Cx: *w.Cx, Cy: *w.Cy}
	if err := k.Validate(); err != nil {
		p.add("intrinsics", ErrInvalid, "%s", strings.TrimPrefix(err.Error(), "intrinsics: "))
		return
	}
	if int64(k.Width)*int64(k.Height) > MaxPixels {
		p.add("intrinsics", ErrInvalid, "%d×%d pixels, more than the %d a sweep image may have", k.Width, k.Height, MaxPixels)
		return
	}
	m.Intrinsics = k
}

func parseTurntable(p *problems, w *turntableWire) *Turntable {
	t := &Turntable{AngleSign: 1}
	if w.AngleDirection != nil {
		switch *w.AngleDirection {
		case "ccw":
			t.AngleSign = 1
		case "cw":
			t.AngleSign = -1
		default:
			p.add("turntable.angle_direction", ErrInvalid, "%q; want \"ccw\" or \"cw\" (seen from above the plate)", clip(*w.AngleDirection))
		}
	}
	if a := w.Axis; a != nil {
		pt, ok1 := vec3(p, "turntable.axis.point", a.Point)
		dir, ok2 := vec3(p, "turntable.axis.direction", a.Direction)
		if ok2 && r3.Norm(dir) < 1e-9 {
			p.add("turntable.axis.direction", ErrInvalid, "zero vector; want the upward axis direction")
			ok2 = false
		}
		if ok1 && ok2 {
			// Normalise unless already unit to rounding, so that a
			// written direction reads back bit for bit.
			if math.Abs(r3.Norm(dir)-1) > 1e-14 {
				dir = mesh.Normalize(dir)
			}
			t.Axis = &Axis{Point: pt, Direction: dir}
		}
	}
	return t
}

func vec3(p *problems, field string, v []float64) (r3.Vec, bool) {
	if len(v) != 3 {
		p.add(field, ErrInvalid, "%d numbers, want 3 (x, y, z in the camera frame of frame 0)", len(v))
		return r3.Vec{}, false
	}
	return r3.Vec{X: v[0], Y: v[1], Z: v[2]}, true
}

func parseFrame(p *problems, data []byte, i int, raw json.RawMessage, m *Manifest, seen map[string]string) {
	prefix := fmt.Sprintf("frames[%d]", i)
	var w frameWire
	if err := decodeStrict(raw, &w); err != nil {
		p.addErr(jsonError(data, prefix, err))
		return
	}
	f := &m.Frames[i]
	for _, img := range []struct {
		name string
		v    *string
		dst  *string
	}{{"color", w.Color, &f.Color}, {"depth", w.Depth, &f.Depth}} {
		field := prefix + "." + img.name
		if img.v == nil {
			p.add(field, ErrInvalid, "missing; want a PNG path relative to the sweep folder")
			continue
		}
		if err := checkRelPath(*img.v); err != nil {
			p.add(field, ErrInvalid, "%q: %v", clip(*img.v), err)
			continue
		}
		clean := path.Clean(*img.v)
		if other, dup := seen[clean]; dup {
			p.add(field, ErrInvalid, "%q is also %s; every image file belongs to one frame", clean, other)
			continue
		}
		seen[clean] = field
		*img.dst = clean
	}
	num := func(field string, n *json.Number) *float64 {
		if n == nil {
			return nil
		}
		v, err := strconv.ParseFloat(string(*n), 64)
		if err != nil && !errors.Is(err, strconv.ErrRange) {
			p.add(prefix+"."+field, ErrInvalid, "%q is not a number", clip(string(*n)))
			return nil
		}
		return &v // ±Inf on overflow: a per-frame problem, see FrameProblems
	}
	f.Time = num("time_s", w.TimeS)
	if w.TurntableDeg != nil {
		if m.Rig == RigHandheld {
			p.add(prefix+".turntable_deg", ErrInvalid, "given in a handheld sweep; a handheld frame carries cam_to_world or nothing")
		} else if d := num("turntable_deg", w.TurntableDeg); d != nil {
			r := *d * math.Pi / 180
			f.Angle = &r
		}
	}
	if w.CamToWorld != nil {
		if m.Rig == RigTurntable {
			p.add(prefix+".cam_to_world", ErrInvalid, "given in a turntable sweep; turntable poses follow from turntable_deg and the axis")
			return
		}
		if len(w.CamToWorld) > 16 {
			// Bound the copy; FrameProblems reports the wrong length.
			w.CamToWorld = w.CamToWorld[:17]
		}
		f.CamToWorld = make([]float64, len(w.CamToWorld))
		for j := range w.CamToWorld {
			v := num(fmt.Sprintf("cam_to_world[%d]", j), &w.CamToWorld[j])
			if v == nil {
				return
			}
			f.CamToWorld[j] = *v
		}
	}
}

// checkRelPath accepts a slash-separated path that stays inside the
// sweep folder.
func checkRelPath(s string) error {
	switch {
	case s == "":
		return errors.New("empty path")
	case len(s) > maxPathLen:
		return fmt.Errorf("path longer than %d bytes", maxPathLen)
	case !utf8.ValidString(s):
		return errors.New("path is not valid UTF-8")
	case strings.ContainsRune(s, '\\'):
		return errors.New("backslash in path; use forward slashes")
	case strings.ContainsRune(s, 0):
		return errors.New("NUL byte in path")
	case path.IsAbs(s) || filepath.IsAbs(s):
		return errors.New("absolute path; paths are relative to the sweep folder")
	}
	for _, el := range strings.Split(s, "/") {
		if el == ".." {
			return errors.New("path leaves the sweep folder (\"..\")")
		}
	}
	if c := path.Clean(s); c == "." || !filepath.IsLocal(filepath.FromSlash(c)) {
		return errors.New("not a file path inside the sweep folder")
	}
	return nil
}

// FrameProblems reports the per-frame problems that the manifest alone
// reveals: non-finite times or angles, a turntable frame without an
// angle when the turntable has no calibrated axis, and camera poses
// that are not 16 finite numbers forming a rigid transform. The result
// is indexed like Frames (nil where the frame is fine).
func (m *Manifest) FrameProblems() []*FrameError {
	out := make([]*FrameError, len(m.Frames))
	for i := range m.Frames {
		out[i] = m.frameProblem(i)
	}
	return out
}

func (m *Manifest) frameProblem(i int) *FrameError {
	f := &m.Frames[i]
	bad := func(field, format string, args ...any) *FrameError {
		return &FrameError{Frame: i, File: ManifestName, Field: field, Msg: fmt.Sprintf(format, args...)}
	}
	if f.Time != nil && !finite(*f.Time) {
		return bad("time_s", "%v is not a finite time", *f.Time)
	}
	if m.Rig == RigTurntable {
		if f.Angle == nil {
			if m.Turntable == nil || m.Turntable.Axis == nil {
				return bad("turntable_deg", "missing; without a calibrated turntable axis every frame needs its angle")
			}
		} else if !finite(*f.Angle) {
			return bad("turntable_deg", "%v is not a finite angle", *f.Angle*180/math.Pi)
		}
	}
	if f.CamToWorld != nil {
		if len(f.CamToWorld) != 16 {
			return bad("cam_to_world", "%d numbers, want 16 (a row-major 4×4 matrix)", len(f.CamToWorld))
		}
		var a [16]float64
		copy(a[:], f.CamToWorld)
		if _, err := mesh.PoseFromMat4(a, PoseTolerance); err != nil {
			return bad("cam_to_world", "not a rigid transform: %s", strings.TrimPrefix(err.Error(), "mesh: "))
		}
	}
	return nil
}

// Validate re-checks a manifest built in memory (e.g. by a writer) by
// encoding and parsing it again: it returns the sweep-level problems
// ParseManifest would report.
func (m *Manifest) Validate() error {
	_, err := m.Encode()
	return err
}

// Encode returns the manifest as indented JSON, after checking that it
// parses back: a manifest that would not load is never written.
func (m *Manifest) Encode() ([]byte, error) {
	w := manifestWire{
		Format:     ptr(ManifestFormat),
		Version:    ptr(m.Version),
		Rig:        ptr(string(m.Rig)),
		Provenance: m.Provenance,
	}
	k := m.Intrinsics
	w.Intrinsics = &intrinsicsWire{Width: &k.Width, Height: &k.Height, Fx: &k.Fx, Fy: &k.Fy, Cx: &k.Cx, Cy: &k.Cy}
	if m.DepthUnit != DefaultDepthUnit {
		w.DepthUnitM = ptr(m.DepthUnit)
	}
	if m.DepthRange != (DepthRange{}) {
		w.DepthRangeM = &rangeWire{Near: ptr(m.DepthRange.Near), Far: ptr(m.DepthRange.Far)}
	}
	if t := m.Turntable; t != nil {
		tw := &turntableWire{}
		switch t.AngleSign {
		case 1:
			tw.AngleDirection = ptr("ccw")
		case -1:
			tw.AngleDirection = ptr("cw")
		default:
			return nil, &SweepError{File: ManifestName, Field: "turntable.angle_direction", Msg: fmt.Sprintf("AngleSign %d, want +1 or -1", t.AngleSign), Kind: ErrInvalid}
		}
		if a := t.Axis; a != nil {
			tw.Axis = &axisWire{
				Point:     []float64{a.Point.X, a.Point.Y, a.Point.Z},
				Direction: []float64{a.Direction.X, a.Direction.Y, a.Direction.Z},
			}
		}
		w.Turntable = tw
	}
	w.Frames = make([]json.RawMessage, len(m.Frames))
	for i := range m.Frames {
		f := &m.Frames[i]
		fw := frameWire{Color: ptr(f.Color), Depth: ptr(f.Depth)}
		if f.Time != nil {
			fw.TimeS = numPtr(*f.Time)
		}
		if f.Angle != nil {
			// 12 significant digits: 10° steps read as 10, not
			// 10.000000000000002, and the error (< 1e-11 relative) is far
			// below any turntable's resolution.
			fw.TurntableDeg = numPtr(roundSig(*f.Angle*180/math.Pi, 12))
		}
		if f.CamToWorld != nil {
			fw.CamToWorld = make([]json.Number, len(f.CamToWorld))
			for j, v := range f.CamToWorld {
				fw.CamToWorld[j] = *numPtr(v)
			}
		}
		for _, n := range []*json.Number{fw.TimeS, fw.TurntableDeg} {
			if n != nil && *n == "" {
				return nil, &SweepError{File: ManifestName, Field: fmt.Sprintf("frames[%d]", i), Msg: "non-finite time or angle cannot be written", Kind: ErrInvalid}
			}
		}
		for _, n := range fw.CamToWorld {
			if n == "" {
				return nil, &SweepError{File: ManifestName, Field: fmt.Sprintf("frames[%d].cam_to_world", i), Msg: "non-finite entry cannot be written", Kind: ErrInvalid}
			}
		}
		b, err := json.Marshal(fw)
		if err != nil {
			return nil, fmt.Errorf("reconstruct: encoding frames[%d]: %w", i, err)
		}
		w.Frames[i] = b
	}
	if w.Turntable != nil && w.Turntable.Axis != nil {
		for _, v := range append(append([]float64(nil), w.Turntable.Axis.Point...), w.Turntable.Axis.Direction...) {
			if !finite(v) {
				return nil, &SweepError{File: ManifestName, Field: "turntable.axis", Msg: "non-finite entry", Kind: ErrInvalid}
			}
		}
	}
	for _, v := range []float64{k.Fx, k.Fy, k.Cx, k.Cy, m.DepthUnit, m.DepthRange.Near, m.DepthRange.Far} {
		if !finite(v) {
			return nil, &SweepError{File: ManifestName, Msg: "non-finite intrinsics, depth unit or depth range", Kind: ErrInvalid}
		}
	}
	b, err := json.Marshal(w)
	if err != nil {
		return nil, fmt.Errorf("reconstruct: encoding manifest: %w", err)
	}
	var out bytes.Buffer
	if err := json.Indent(&out, b, "", "  "); err != nil {
		return nil, fmt.Errorf("reconstruct: encoding manifest: %w", err)
	}
	out.WriteByte('\n')
	if _, err := ParseManifest(out.Bytes()); err != nil {
		return nil, err
	}
	return out.Bytes(), nil
}

func ptr[T any](v T) *T { return &v }

// numPtr formats a finite float as the shortest JSON number that reads
// back to the same float64; non-finite values give an empty Number,
// which Encode reports.
func numPtr(v float64) *json.Number {
	if !finite(v) {
		n := json.Number("")
		return &n
	}
	n := json.Number(strconv.FormatFloat(v, 'g', -1, 64))
	return &n
}

func roundSig(v float64, digits int) float64 {
	if !finite(v) || v == 0 {
		return v
	}
	r, err := strconv.ParseFloat(strconv.FormatFloat(v, 'g', digits, 64), 64)
	if err != nil {
		return v
	}
	return r
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// clip shortens user-supplied text quoted in an error.
func clip(s string) string {
	const n = 80
	if len(s) <= n {
		return s
	}
	return s[:n] + "…"
}

// decodeStrict decodes exactly one JSON value, refusing unknown fields
// and trailing data.
func decodeStrict(data []byte, v any) error {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return err
	}
	// Anything but white space after the value is an error.
	if off := dec.InputOffset(); len(bytes.TrimSpace(data[off:])) != 0 {
		return &trailingError{off: off}
	}
	return nil
}

// jsonError turns an encoding/json error into a SweepError naming the
// line (for syntax errors), the field and what was wrong. prefix is the
// JSON path of the value being decoded ("" for the whole manifest).
func jsonError(data []byte, prefix string, err error) error {
	se := &SweepError{File: ManifestName, Field: prefix, Kind: ErrInvalid}
	var syn *json.SyntaxError
	var typ *json.UnmarshalTypeError
	var trail *trailingError
	switch {
	case errors.As(err, &syn):
		if prefix == "" {
			se.Line = lineAt(data, syn.Offset)
		}
		se.Msg = "JSON syntax error: " + strings.TrimPrefix(syn.Error(), "json: ")
	case errors.As(err, &typ):
		field := typ.Field
		if prefix != "" && field != "" {
			field = prefix + "." + field
		} else if prefix != "" {
			field = prefix
		}
		se.Field = field
		if prefix == "" {
			se.Line = lineAt(data, typ.Offset)
		}
		kind := jsonKind(typ.Type)
		switch {
		case strings.HasPrefix(typ.Value, "number") && kind == "a number":
			se.Msg = typ.Value + " is out of range for a 64-bit float"
		case strings.HasPrefix(typ.Value, "number") && kind == "an integer":
			se.Msg = typ.Value + " is not a whole number in range"
		default:
			se.Msg = fmt.Sprintf("%s where %s was expected", typ.Value, kind)
		}
	case errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF):
		se.Msg = "empty or truncated JSON"
	case errors.As(err, &trail):
		if prefix == "" {
			se.Line = lineAt(data, trail.off)
		}
		se.Msg = "unexpected data after the JSON value"
	default:
		msg := strings.TrimPrefix(err.Error(), "json: ")
		if i := strings.Index(msg, "invalid number literal, trying to unmarshal "); i >= 0 {
			lit := strings.TrimSuffix(strings.TrimPrefix(msg[i:], "invalid number literal, trying to unmarshal "), " into Number")
			if u, err := strconv.Unquote(lit); err == nil {
				lit = u
			}
			msg = "a string where a number was expected (" + clip(lit) + ")"
		} else if strings.HasPrefix(msg, "unknown field ") {
			name := strings.TrimPrefix(msg, "unknown field ")
			if prefix == "" {
				se.Line = lineAt(data, int64(bytes.Index(data, []byte(name))))
			}
			msg = "unknown field " + name + "; check its spelling against the sweep format"
		}
		se.Msg = msg
	}
	return se
}

type trailingError struct{ off int64 }

func (e *trailingError) Error() string { return "unexpected data after the JSON value" }

func jsonKind(t reflect.Type) string {
	if t == reflect.TypeFor[json.Number]() {
		return "a number"
	}
	switch t.Kind().String() {
	case "int", "int64":
		return "an integer"
	case "float64":
		return "a number"
	case "string":
		return "a string"
	case "slice":
		return "an array"
	case "struct", "map", "ptr":
		return "an object"
	}
	return t.String()
}

// lineAt returns the 1-based line of byte offset off in data.
func lineAt(data []byte, off int64) int {
	if off < 0 {
		return 0
	}
	if off > int64(len(data)) {
		off = int64(len(data))
	}
	return bytes.Count(data[:off], []byte("\n")) + 1
}
