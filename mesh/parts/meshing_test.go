package parts

import (
	"fmt"
	"math"
	"testing"

	"github.com/scanfold/scanfold/mesh"
	"gonum.org/v1/gonum/spatial/r3"
)

// meshVolumeArea returns the enclosed volume by the divergence theorem
// (the sum of the signed tetrahedra v0·(v1 × v2)/6 over the faces of a
// closed, outward-oriented mesh; a standard formula, e.g. Zhang & Chen
// 2001, "Efficient feature extraction for 2D/3D objects in mesh
// representation", ICIP) and the total triangle area.
func meshVolumeArea(m *mesh.Mesh) (vol, area float64) {
	for _, f := range m.Faces {
		a, b, c := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		vol += r3.Dot(a, r3.Cross(b, c)) / 6
		area += r3.Norm(r3.Cross(r3.Sub(b, a), r3.Sub(c, a))) / 2
	}
	return vol, area
}

// closedAndOriented returns an error naming the first directed edge that
// does not have exactly one opposite twin: on a closed, consistently
// oriented surface every edge is shared by exactly two faces, traversed
// once each way.
func closedAndOriented(m *mesh.Mesh) error {
	type edge [2]uint32
	seen := make(map[edge]int, 3*len(m.Faces))
	for _, f := range m.Faces {
		for k := 0; k < 3; k++ {
			seen[edge{f[k], f[(k+1)%3]}]++
		}
	}
	for e, n := range seen {
		if n != 1 || seen[edge{e[1], e[0]}] != 1 {
			return fmt.Errorf("edge %v used %d times, its reverse %d times", e, n, seen[edge{e[1], e[0]}])
		}
	}
	return nil
}

// meshErrorBudget gives, per part, what the marching-cubes error bound
// below is made of, in millimetres: sharp is the total length of the
// sharp (creased) edges, curved the sum over curved faces of area /
// radius of curvature, and minRadius the smallest radius of curvature.
// Values are worked out from each part's dimensions (the sums are in the
// comments).
var meshErrorBudget = map[string]struct{ sharp, curved, minRadius float64 }{
	// Five sharp profile corners × 60 along x, the two end outlines
	// (perimeter 158.7 each), four hole rims 2π·4.25; curved: two hole
	// walls 2π·4.25·4 / 4.25 and the fillet (π/2)·3·60 / 3.
	"bracket": {
		sharp:     5*60 + 2*(2*40+2*4+2*33+math.Pi/2*3) + 4*2*math.Pi*4.25,
		curved:    2*2*math.Pi*4 + math.Pi/2*60,
		minRadius: 3,
	},
	// Every profile vertex is a crease and sweeps a circle 2π·r (radii
	// sum to 162); curved: cylinders 2π·length (4 + 24 + 28 long) and the
	// 45° chamfer cones 2π·slant·cos 45° (slants 2·0.71 + 3·1.41).
	"bushing": {
		sharp:     2 * math.Pi * (11 + 19.5 + 20 + 20 + 19.5 + 14 + 14 + 13 + 11 + 10 + 10),
		curved:    2*math.Pi*(4+24+28) + 2*math.Pi*(2*0.5+3*1)*math.Sqrt2*math.Sqrt2/2,
		minRadius: 10,
	},
	// Six corner edges 13 − 2·1.07; twelve cone–flat curves, each longer
	// than the side (13.86) by about 1%, counted 14.1; two face circles
	// 2π·12; the countersinks' four rims 2π·7.8 and 2π·7 twice; curved:
	// the bore 2π·11.4, the cones (2·65.4 mm² over radius 2·12) and the
	// countersinks 2π·1.13·cos 45° twice.
	"nut": {
		sharp:     6*(13-2*1.07) + 12*14.1 + 2*2*math.Pi*12 + 2*2*math.Pi*(7.8+7),
		curved:    2*math.Pi*11.4 + 2*65.4/24 + 2*2*math.Pi*1.13*math.Sqrt2/2,
		minRadius: 3,
	},
	// Fourteen circular rims: each port's junction with the body or
	// flange and its end, each bore's mouth and bottom (radii 13, 18,
	// 13, 18, 8, 8, 9, 9, 5, 5, 12, 12, 4, 4); curved: the 3 mm body
	// roundings 2π·3·(44 + 34 + 34)/3 and corners 4π·3²/3, and each
	// cylinder 2π·length (15, 5, 40, 14, 29, 12, 22).
	"valve": {
		sharp:     2 * math.Pi * (13 + 18 + 13 + 18 + 8 + 8 + 9 + 9 + 5 + 5 + 12 + 12 + 4 + 4),
		curved:    2*math.Pi*(44+34+34) + 4*math.Pi*3 + 2*math.Pi*(15+5+40+14+29+12+22),
		minRadius: 3,
	},
	// No creases; the 4 mm roundings 2π·4·(72 + 42 + 22)/4 and corners
	// 4π·4²/4.
	"labelbox": {
		sharp:     0,
		curved:    2*math.Pi*(72+42+22) + 4*math.Pi*4,
		minRadius: 4,
	},
}

// meshTolerances returns the volume (m³) and area (m²) error bounds for
// marching cubes at spacing h on an exact (or conservative) SDF, derived
// from the lattice:
//
//   - Where a single flat face crosses a cell the SDF is linear along
//     the cell's edges, so the interpolated vertices, and the triangles,
//     lie on the face exactly.
//   - At a crease the extracted surface cuts across the corner of the
//     cells it passes through (a convex crease loses, a concave one
//     gains): a triangle of legs at most h, area at most h²/2 per unit
//     length of crease, and a surface shortfall of at most
//     (2 − √2)·h (two legs replaced by their hypotenuse).
//   - On a curved face of radius ρ the triangles are chords; an edge of
//     a triangle spans at most a cell diagonal √3·h, so it sags at most
//     3h²/(8ρ) below the surface (the sagitta c²/(8ρ)); over an area A
//     that is at most A·3h²/(8ρ) of volume, and the chords' area falls
//     short by a fraction of at most (chord angle)²/8 ≤ 3h²/(8ρ²).
func meshTolerances(name string, h float64) (vol, area float64) {
	b := meshErrorBudget[name]
	hm := h / mm
	vol = hm * hm * (b.sharp/2 + 3*b.curved/8)
	area = hm*(2-math.Sqrt2)*b.sharp + 3*hm*hm*b.curved/(8*b.minRadius)
	return vol * mm * mm * mm, area * mm * mm
}

// Every part meshes watertight and consistently oriented at 1 mm (and at
// 0.5 mm outside short mode), its mesh volume and area agree with the
// closed forms within the bounds of meshTolerances, and its mesh's
// extent agrees with Min and Max to within one spacing (vertices lie on
// lattice edges that cross the surface).
func TestMeshClosedVolumeArea(t *testing.T) {
	spacings := []float64{1 * mm, 0.5 * mm}
	if testing.Short() {
		spacings = spacings[:1]
	}
	for _, p := range All() {
		prevErr := math.Inf(1)
		for _, h := range spacings {
			m, err := p.Mesh(h)
			if err != nil {
				t.Fatal(err)
			}
			if err := m.Validate(); err != nil {
				t.Fatalf("%s at %g mm: %v", p.Name, h/mm, err)
			}
			if len(m.Faces) == 0 {
				t.Fatalf("%s at %g mm: empty mesh", p.Name, h/mm)
			}
			if err := closedAndOriented(m); err != nil {
				t.Errorf("%s at %g mm: not watertight: %v", p.Name, h/mm, err)
			}
			v, a := meshVolumeArea(m)
			// The mesh package's own metrics must agree with these
			// independent sums (rounding only: 1e-9 relative).
			if !m.IsWatertight() || !near(m.SignedVolume(), v, 1e-9*v) || !near(m.Area(), a, 1e-9*a) {
				t.Errorf("%s at %g mm: mesh metrics disagree: watertight %v, volume %g vs %g, area %g vs %g",
					p.Name, h/mm, m.IsWatertight(), m.SignedVolume(), v, m.Area(), a)
			}
			tv, ta := meshTolerances(p.Name, h)
			if d := math.Abs(v - p.Volume()); d > tv {
				t.Errorf("%s at %g mm: mesh volume %.1f mm³, closed form %.1f mm³, off by %.1f > %.1f",
					p.Name, h/mm, v/(mm*mm*mm), p.Volume()/(mm*mm*mm), d/(mm*mm*mm), tv/(mm*mm*mm))
			}
			if d := math.Abs(a - p.Area()); d > ta {
				t.Errorf("%s at %g mm: mesh area %.1f mm², closed form %.1f mm², off by %.1f > %.1f",
					p.Name, h/mm, a/(mm*mm), p.Area()/(mm*mm), d/(mm*mm), ta/(mm*mm))
			}
			// Halving the spacing must not make the volume worse.
			if d := math.Abs(v - p.Volume()); d > prevErr {
				t.Errorf("%s: volume error grew from %.2f to %.2f mm³ when the spacing fell to %g mm",
					p.Name, prevErr/(mm*mm*mm), d/(mm*mm*mm), h/mm)
			} else {
				prevErr = d
			}
			lo := r3.Vec{X: math.Inf(1), Y: math.Inf(1), Z: math.Inf(1)}
			hi := r3.Scale(-1, lo)
			for _, q := range m.Vertices {
				lo = r3.Vec{X: math.Min(lo.X, q.X), Y: math.Min(lo.Y, q.Y), Z: math.Min(lo.Z, q.Z)}
				hi = r3.Vec{X: math.Max(hi.X, q.X), Y: math.Max(hi.Y, q.Y), Z: math.Max(hi.Z, q.Z)}
			}
			for axis := 0; axis < 3; axis++ {
				if math.Abs(comp(lo, axis)-comp(p.Min, axis)) > h || math.Abs(comp(hi, axis)-comp(p.Max, axis)) > h {
					t.Errorf("%s at %g mm: mesh extent %v–%v, part extent %v–%v", p.Name, h/mm, lo, hi, p.Min, p.Max)
					break
				}
			}
			t.Logf("%s at %g mm: %d vertices, %d faces; volume error %.2f mm³ (bound %.1f), area error %.2f mm² (bound %.1f)",
				p.Name, h/mm, len(m.Vertices), len(m.Faces), (v-p.Volume())/(mm*mm*mm), tv/(mm*mm*mm), (a-p.Area())/(mm*mm), ta/(mm*mm))
		}
	}
}

// The print survives meshing at 1 mm: the coloured mesh carries enough
// vertices of every print and paint colour for a colour-aware scorer to
// see them (a vertex counts when it is within 0.1 of the base colour in
// the HSV distance of the symmetry test, which the ±6-level noise
// stays well inside).
func TestMeshCarriesPrint(t *testing.T) {
	want := map[string][]mesh.RGB{
		"bracket":  {powderGrey, paintRed},
		"bushing":  {bronze, bronzeBright},
		"nut":      {platedSteel},
		"valve":    {bodyBlue, labelYellow, inkBlack, bareSteel},
		"labelbox": {kraft, paperWhite, inkBlack, arrowRed},
	}
	for _, p := range All() {
		m, err := p.Mesh(1 * mm)
		if err != nil {
			t.Fatal(err)
		}
		if len(m.Colors) != len(m.Vertices) {
			t.Fatalf("%s: %d colours for %d vertices", p.Name, len(m.Colors), len(m.Vertices))
		}
		for _, ref := range want[p.Name] {
			n := 0
			for _, c := range m.Colors {
				if hsvDiff(c, ref) < 0.1 {
					n++
				}
			}
			if n < 20 {
				t.Errorf("%s: only %d vertices of colour %v", p.Name, n, ref)
			}
		}
	}
}

func TestMeshBadSpacing(t *testing.T) {
	p, _ := Get("nut")
	for _, h := range []float64{0, -1e-3, math.NaN(), math.Inf(1), 1e-7} {
		if _, err := p.Mesh(h); err == nil {
			t.Errorf("Mesh(%g) gave no error", h)
		}
	}
}

// BenchmarkMesh meshes each part at 1 mm: SDF sampling, marching cubes
// and vertex colours.
func BenchmarkMesh(b *testing.B) {
	for _, p := range All() {
		b.Run(p.Name, func(b *testing.B) {
			for b.Loop() {
				if _, err := p.Mesh(1 * mm); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
