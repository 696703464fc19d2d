package parts

import (
	"fmt"
	"math"
	"strings"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// mm is one millimetre in metres; the part definitions are written in
// millimetres and scaled once.
const mm = 1e-3

// Part is one procedural demo part: a signed-distance function, a colour
// function and what is known about its shape, all in the part frame
// (metres, +z up, resting on z = 0, origin at the centre of its
// footprint; see the package documentation).
type Part struct {
	// Name is the short name the part is known by (Names lists them).
	Name string
	// Description is a one-line human description with the overall size.
	Description string
	// SDF returns the signed distance from p to the part's surface in
	// metres, negative inside. It is 1-Lipschitz (|∇SDF| ≤ 1) and never
	// larger in magnitude than the true distance; it is safe to call
	// from several goroutines.
	SDF func(p r3.Vec) float64
	// Color returns the part's colour at a surface point p. It is defined
	// everywhere but meant for points on (or within a millimetre of) the
	// surface; it is deterministic and safe for concurrent use.
	Color func(p r3.Vec) mesh.RGB
	// Min and Max are the corners of the part's exact axis-aligned
	// extent (no margin); Bounds adds one.
	Min, Max r3.Vec
	// Symmetry is the symmetry of the geometry and whether the colour
	// breaks it.
	Symmetry Symmetry

	volume, area float64 // analytic, m³ and m²
}

// Bounds returns the part's extent grown by margin metres on every side,
// a box that encloses the part with room for a sampling grid.
func (p *Part) Bounds(margin float64) mesh.Box {
	m := r3.Vec{X: margin, Y: margin, Z: margin}
	return mesh.Box{Min: r3.Sub(p.Min, m), Max: r3.Add(p.Max, m)}
}

// Size returns the part's overall size along x, y and z in metres.
func (p *Part) Size() r3.Vec { return r3.Sub(p.Max, p.Min) }

// Volume returns the part's volume in cubic metres, computed in closed
// form from handbook formulas (each part's file states its formula).
func (p *Part) Volume() float64 { return p.volume }

// Area returns the part's surface area in square metres, computed in
// closed form (each part's file states its formula).
func (p *Part) Area() float64 { return p.area }

// Symmetry describes the rigid symmetries of a part's geometry: the
// proper rotations that map the solid onto itself, and its mirror
// planes. Every axis and plane passes through Point.
type Symmetry struct {
	// Point lies on the rotation axis, the flip axis and every mirror
	// plane (part frame, metres).
	Point r3.Vec
	// Axis is the unit axis of rotational symmetry through Point; the
	// zero vector when Fold is 1.
	Axis r3.Vec
	// Fold is the order of the rotational symmetry about Axis: 0 for a
	// solid of revolution (every angle), 1 for none, n ≥ 2 for n-fold.
	Fold int
	// Flip is a unit axis through Point, perpendicular to Axis, about
	// which a half turn maps the geometry onto itself (the part turned
	// upside down looks the same); the zero vector when there is none.
	Flip r3.Vec
	// Mirrors lists the unit normals of the mirror planes through Point.
	// For Fold 0 every plane that contains Axis is a mirror too; those
	// are not listed.
	Mirrors []r3.Vec
	// ColorBreaks reports that the colour pattern (beyond its fine
	// noise) is not symmetric: the print, label or paint mark tells the
	// geometrically equivalent poses apart, as a colour-aware scorer can
	// but a geometry-only one cannot.
	ColorBreaks bool
}

// Rotations returns the proper rigid symmetries of the geometry as
// poses in the part frame (x ↦ R·(x − Point) + Point), the identity
// first. For Fold 0 the continuous rotation is sampled at steps equally
// spaced angles (steps < 1 counts as 1). With a Flip axis the list holds
// each rotation followed by the half turn about Flip as well. These are
// the transforms a symmetry-aware pose error (such as MSSD) minimises
// over; mirrors are not rigid motions and are not included.
func (s Symmetry) Rotations(steps int) []mesh.Pose {
	n := s.Fold
	if n == 0 {
		n = max(steps, 1)
	}
	if n < 1 || s.Axis == (r3.Vec{}) {
		n = 1
	}
	flips := []mesh.Mat3{mesh.Identity3()}
	if s.Flip != (r3.Vec{}) {
		flips = append(flips, mesh.RotationFromAxisAngle(s.Flip, math.Pi))
	}
	out := make([]mesh.Pose, 0, n*len(flips))
	for _, f := range flips {
		for k := 0; k < n; k++ {
			r := mesh.RotationFromAxisAngle(s.Axis, 2*math.Pi*float64(k)/float64(n)).Mul(f)
			if k == 0 && f == mesh.Identity3() {
				r = mesh.Identity3()
			}
			out = append(out, mesh.Pose{R: r, T: r3.Sub(s.Point, r.MulVec(s.Point))})
		}
	}
	return out
}

// catalogue lists the parts in their fixed order with their builders.
var catalogue = []struct {
	name  string
	build func() *Part
}{
	{"bracket", newBracket},
	{"bushing", newBushing},
	{"nut", newNut},
	{"valve", newValve},
	{"labelbox", newLabelBox},
}

// Names returns the short names of the demo parts in a fixed order:
// bracket, bushing, nut, valve, labelbox.
func Names() []string {
	out := make([]string, len(catalogue))
	for i, c := range catalogue {
		out[i] = c.name
	}
	return out
}

// Get returns a new copy of the part with the given short name, or an
// error that lists the known names.
func Get(name string) (*Part, error) {
	for _, c := range catalogue {
		if c.name == name {
			return c.build(), nil
		}
	}
	return nil, fmt.Errorf("parts: unknown part %q (known parts: %s)", name, strings.Join(Names(), ", "))
}

// All returns new copies of every demo part in the order of Names.
func All() []*Part {
	out := make([]*Part, len(catalogue))
	for i, c := range catalogue {
		out[i] = c.build()
	}
	return out
}

func vmm(x, y, z float64) r3.Vec { return r3.Vec{X: x * mm, Y: y * mm, Z: z * mm} }
