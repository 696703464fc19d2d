package mesh

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
)

// NormalSource says where a surface sample's normal comes from.
type NormalSource int

const (
	// NormalsInterpolated interpolates the vertex normals (the mesh's
	// own, or area-weighted ones from VertexNormals when it has none)
	// with the sample's barycentric coordinates: smooth across the fine
	// triangles of a scanned or extracted surface.
	NormalsInterpolated NormalSource = iota
	// NormalsFace uses the normal of the face the sample lies on: exact
	// on flat faces and sharp at creases.
	NormalsFace
)

// MaxSampleCandidates bounds the candidate points Sample draws (and so
// its memory): a spacing this fine for the mesh's area is refused.
const MaxSampleCandidates = 20_000_000

// SampleOptions tunes Sample.
type SampleOptions struct {
	// Spacing is the smallest distance between two output points
	// (metres). 0 means SpacingFraction times the mesh diameter.
	// DEFAULT: 0
	Spacing float64
	// SpacingFraction is the spacing as a fraction of the diameter when
	// Spacing is 0: Drost et al. (2010, CVPR, DOI
	// 10.1109/CVPR.2010.5540108) sample models at τ_d = 0.05.
	// DEFAULT: 0.05
	SpacingFraction float64
	// Oversample is the number of candidate points drawn per
	// Spacing² of surface area before thinning. More candidates fill the
	// surface closer to the densest random packing (see Thin).
	// DEFAULT: 20
	Oversample float64
	// Normals selects the normal of each sample.
	// DEFAULT: NormalsInterpolated
	Normals NormalSource
	// Seed seeds the random candidates; the output is a pure function
	// of the mesh and the options.
	// DEFAULT: 1
	Seed uint64
}

// DefaultSampleOptions returns the documented defaults.
func DefaultSampleOptions() SampleOptions {
	return SampleOptions{SpacingFraction: 0.05, Oversample: 20, Normals: NormalsInterpolated, Seed: 1}
}

// Sample returns an even oriented point cloud on the surface of m:
// candidates drawn uniformly by area (SampleSurface), then thinned so no
// two points are closer than the spacing (Thin). Normals come from the
// mesh (opt.Normals) and colours are interpolated from the vertex
// colours when the mesh has them. The spacing used is returned with the
// cloud. It returns an error wrapping ErrDegenerate for a mesh of zero
// area, and an error for a spacing so fine that more than
// MaxSampleCandidates candidates would be needed.
func Sample(m *Mesh, opt SampleOptions) (*Cloud, float64, error) {
	if err := m.Validate(); err != nil {
		return nil, 0, err
	}
	spacing := opt.Spacing
	if spacing == 0 {
		if !(opt.SpacingFraction > 0 && opt.SpacingFraction <= 1) {
			return nil, 0, fmt.Errorf("mesh: sampling spacing fraction %v, want a value in (0, 1]", opt.SpacingFraction)
		}
		spacing = opt.SpacingFraction * m.Diameter()
	}
	if !(spacing > 0) || math.IsInf(spacing, 0) {
		return nil, 0, fmt.Errorf("mesh: sampling spacing %v m, want a positive finite length: %w", spacing, ErrDegenerate)
	}
	if !(opt.Oversample >= 1) || math.IsInf(opt.Oversample, 0) {
		return nil, 0, fmt.Errorf("mesh: oversampling %v, want at least 1", opt.Oversample)
	}
	area := m.Area()
	if !(area > 0) {
		return nil, 0, fmt.Errorf("mesh: sampling a mesh of zero area: %w", ErrDegenerate)
	}
	cand := math.Ceil(opt.Oversample * area / (spacing * spacing))
	if cand > MaxSampleCandidates {
		return nil, 0, fmt.Errorf("mesh: spacing %.4g m on %.4g m² needs %.0f candidates, more than %d: choose a coarser spacing", spacing, area, cand, MaxSampleCandidates)
	}
	c, _, err := SampleSurface(m, int(cand), opt.Seed, opt.Normals)
	if err != nil {
		return nil, 0, err
	}
	keep, err := Thin(c.Points, spacing)
	if err != nil {
		return nil, 0, err
	}
	return c.Subset(keep), spacing, nil
}

// SampleSurface draws n points uniformly over the area of m: a face with
// probability proportional to its area (binary search in the cumulative
// areas), then a uniform point in it from two uniform numbers r1, r2 as
// (1 − √r1)·a + √r1·(1 − r2)·b + √r1·r2·c (Osada, Funkhouser, Chazelle &
// Dobkin 2002, "Shape distributions", ACM TOG 21(4), DOI
// 10.1145/571647.571648, eq. 1). It returns the points with normals
// (normals) and colours (when m has them), and the face of each point.
// The generator is PCG seeded by seed, so the result is reproducible.
func SampleSurface(m *Mesh, n int, seed uint64, normals NormalSource) (*Cloud, []int, error) {
	if err := m.Validate(); err != nil {
		return nil, nil, err
	}
	if n < 0 {
		return nil, nil, fmt.Errorf("mesh: %d samples requested", n)
	}
	cum := make([]float64, len(m.Faces))
	var total float64
	for i, f := range m.Faces {
		if !degenerateIndex(f) {
			total += 0.5 * r3.Norm(m.faceCross(f))
		}
		cum[i] = total
	}
	if !(total > 0) || math.IsInf(total, 0) {
		return nil, nil, fmt.Errorf("mesh: sampling a mesh of zero or non-finite area: %w", ErrDegenerate)
	}
	var vn []r3.Vec
	if normals == NormalsInterpolated {
		vn = m.Normals
		if vn == nil {
			vn = m.VertexNormals()
		}
	}
	rng := rand.New(rand.NewPCG(seed, 0x5ca7f01d))
	out := &Cloud{Points: make([]r3.Vec, n), Normals: make([]r3.Vec, n)}
	if m.Colors != nil {
		out.Colors = make([]RGB, n)
	}
	faces := make([]int, n)
	for i := 0; i < n; i++ {
		u := rng.Float64() * total
		fi := sort.SearchFloat64s(cum, u)
		// SearchFloat64s finds the first cum ≥ u; move past equal
		// entries so that a zero-area face is never chosen.
		for fi < len(cum)-1 && cum[fi] <= u {
			fi++
		}
		f := m.Faces[fi]
		r1, r2 := rng.Float64(), rng.Float64()
		s := math.Sqrt(r1)
		w0, w1, w2 := 1-s, s*(1-r2), s*r2
		a, b, c := m.Vertices[f[0]], m.Vertices[f[1]], m.Vertices[f[2]]
		out.Points[i] = r3.Vec{
			X: w0*a.X + w1*b.X + w2*c.X,
			Y: w0*a.Y + w1*b.Y + w2*c.Y,
			Z: w0*a.Z + w1*b.Z + w2*c.Z,
		}
		fn := m.FaceNormal(f)
		nv := fn
		if vn != nil {
			nv = Normalize(r3.Add(r3.Add(r3.Scale(w0, vn[f[0]]), r3.Scale(w1, vn[f[1]])), r3.Scale(w2, vn[f[2]])))
			if nv == (r3.Vec{}) {
				nv = fn
			}
		}
		out.Normals[i] = nv
		if m.Colors != nil {
			ca, cb, cc := m.Colors[f[0]], m.Colors[f[1]], m.Colors[f[2]]
			out.Colors[i] = RGB{
				R: mixChannel(w0, w1, w2, ca.R, cb.R, cc.R),
				G: mixChannel(w0, w1, w2, ca.G, cb.G, cc.G),
				B: mixChannel(w0, w1, w2, ca.B, cb.B, cc.B),
			}
		}
		faces[i] = fi
	}
	return out, faces, nil
}

func mixChannel(w0, w1, w2 float64, a, b, c uint8) uint8 {
	v := w0*float64(a) + w1*float64(b) + w2*float64(c)
	return uint8(math.Max(0, math.Min(255, math.Round(v))))
}

// Subset returns a new cloud of the points of c at the given indices, in
// that order, with their normals and colours.
func (c *Cloud) Subset(idx []int) *Cloud {
	out := &Cloud{Points: make([]r3.Vec, len(idx))}
	if c.Normals != nil {
		out.Normals = make([]r3.Vec, len(idx))
	}
	if c.Colors != nil {
		out.Colors = make([]RGB, len(idx))
	}
	for k, i := range idx {
		out.Points[k] = c.Points[i]
		if c.Normals != nil {
			out.Normals[k] = c.Normals[i]
		}
		if c.Colors != nil {
			out.Colors[k] = c.Colors[i]
		}
	}
	return out
}

// thinMaxCells bounds the grid extent of Thin along each axis: cell
// coordinates are packed into 21 bits each.
const thinMaxCells = 1 << 21

// Thin returns the indices of points kept by Poisson-disk thinning with
// radius spacing: points are visited in the order given, and a point is
// kept when no point kept before it lies closer than spacing. Kept
// points are looked up in a hash of cubic cells of side spacing, so each
// test scans the 27 cells around the point. The result is maximal: every
// input point lies within spacing of a kept one. When the input order is
// random (as from SampleSurface) this is random sequential adsorption,
// which on a plane fills up to a jamming density of about 0.547 of the
// area with disks of diameter spacing (Feder 1980, J. Theor. Biol. 87,
// DOI 10.1016/0022-5193(80)90358-6; value from memory). Points with a
// non-finite coordinate are dropped. It returns an error for a spacing
// that is not positive and finite, or so small relative to the extent of
// points that the grid would exceed 2²¹ cells along an axis.
func Thin(points []r3.Vec, spacing float64) ([]int, error) {
	if !(spacing > 0) || math.IsInf(spacing, 0) {
		return nil, fmt.Errorf("mesh: thinning spacing %v, want a positive finite length", spacing)
	}
	box := EmptyBox()
	for _, p := range points {
		if isFinite(p) {
			box = box.Extend(p)
		}
	}
	if box.Empty() {
		return nil, nil
	}
	inv := 1 / spacing
	size := box.Size()
	if m := math.Max(size.X, math.Max(size.Y, size.Z)) * inv; m >= thinMaxCells-2 {
		return nil, fmt.Errorf("mesh: thinning spacing %.4g m is too fine for an extent of %.4g m (more than %d cells)", spacing, m*spacing, thinMaxCells)
	}
	s2 := spacing * spacing
	g := newCellHash(64)
	next := make([]int32, 0, 64) // chain of kept points in a cell
	var kept []int
	for i, p := range points {
		if !isFinite(p) {
			continue
		}
		cx := int((p.X-box.Min.X)*inv) + 1
		cy := int((p.Y-box.Min.Y)*inv) + 1
		cz := int((p.Z-box.Min.Z)*inv) + 1
		ok := true
	scan:
		for dx := -1; dx <= 1; dx++ {
			for dy := -1; dy <= 1; dy++ {
				for dz := -1; dz <= 1; dz++ {
					for j := g.get(packCell(cx+dx, cy+dy, cz+dz)); j >= 0; j = next[j] {
						q := points[kept[j]]
						ex, ey, ez := q.X-p.X, q.Y-p.Y, q.Z-p.Z
						if ex*ex+ey*ey+ez*ez < s2 {
							ok = false
							break scan
						}
					}
				}
			}
		}
		if !ok {
			continue
		}
		key := packCell(cx, cy, cz)
		next = append(next, g.get(key))
		g.set(key, int32(len(kept)))
		kept = append(kept, i)
	}
	return kept, nil
}

func packCell(x, y, z int) uint64 {
	return uint64(x)<<42 | uint64(y)<<21 | uint64(z)
}

// cellHash maps packed cell coordinates to an int32 by open addressing
// with linear probing (Knuth, TAOCP vol. 3, §6.4, Algorithm L), sized to
// a power of two and kept at most half full. Fibonacci hashing spreads
// the packed keys.
type cellHash struct {
	keys  []uint64 // key+1; 0 marks an empty slot
	vals  []int32
	n     int
	shift uint
}

func newCellHash(capacity int) *cellHash {
	size, shift := 16, uint(60)
	for size < 2*capacity {
		size <<= 1
		shift--
	}
	return &cellHash{keys: make([]uint64, size), vals: make([]int32, size), shift: shift}
}

func (h *cellHash) slot(key uint64) int {
	return int(((key + 1) * 0x9E3779B97F4A7C15) >> h.shift)
}

// get returns the value for key, or −1.
func (h *cellHash) get(key uint64) int32 {
	mask := len(h.keys) - 1
	for i := h.slot(key); ; i = (i + 1) & mask {
		switch h.keys[i] {
		case key + 1:
			return h.vals[i]
		case 0:
			return -1
		}
	}
}

func (h *cellHash) set(key uint64, v int32) {
	if 2*(h.n+1) > len(h.keys) {
		h.grow()
	}
	mask := len(h.keys) - 1
	for i := h.slot(key); ; i = (i + 1) & mask {
		switch h.keys[i] {
		case key + 1:
			h.vals[i] = v
			return
		case 0:
			h.keys[i], h.vals[i] = key+1, v
			h.n++
			return
		}
	}
}

func (h *cellHash) grow() {
	old, oldv := h.keys, h.vals
	h.keys = make([]uint64, 2*len(old))
	h.vals = make([]int32, 2*len(old))
	h.shift--
	h.n = 0
	for i, k := range old {
		if k != 0 {
			h.set(k-1, oldv[i])
		}
	}
}

// DepthCloudOptions tunes DepthCloud.
type DepthCloudOptions struct {
	// Spacing thins the cloud so that no two points are closer than this
	// (metres), visiting pixels in raster order (Thin); 0 keeps every
	// valid pixel. For PPF voting use the model's sampling spacing.
	// DEFAULT: 0
	Spacing float64
	// Window is the half-width in pixels of the square neighbourhood
	// whose points give a pixel's normal by PCA: (2·Window+1)² pixels.
	// DEFAULT: 2
	Window int
	// MaxJump bounds a neighbour's distance from the centre point, in
	// units of the centre's pixel footprint z/fx times Window: farther
	// neighbours lie across a depth discontinuity and are left out. 8
	// keeps surfaces up to about 80° from facing the camera, whose
	// footprint is stretched by 1/cos 80° ≈ 5.8 (geometry of the pinhole
	// model).
	// DEFAULT: 8
	MaxJump float64
	// MinNeighbors is the fewest window points (the centre included) a
	// normal is estimated from; a point with fewer is dropped.
	// DEFAULT: 6
	MinNeighbors int
	// MinDepth and MaxDepth bound the depths used (metres); MaxDepth 0
	// means no upper bound.
	// DEFAULT: 0, 0
	MinDepth, MaxDepth float64
}

// DefaultDepthCloudOptions returns the documented defaults.
func DefaultDepthCloudOptions() DepthCloudOptions {
	return DepthCloudOptions{Window: 2, MaxJump: 8, MinNeighbors: 6}
}

// DepthCloud turns a depth image into an oriented point cloud in the
// camera frame: every pixel with a finite depth > 0 (within the depth
// bounds and, when mask is not nil, with mask set) is back-projected
// through intr; the points are thinned to opt.Spacing in raster order;
// each kept point's normal is the PCA normal (Hoppe et al. 1992) of the
// back-projected points in its image window that lie within the jump
// distance, turned toward the camera (n·p ≤ 0). Colours are taken from
// colors when it is not nil. depth, colors and mask are row-major,
// intr.Width × intr.Height. Points whose window holds fewer than
// MinNeighbors usable points are dropped. The result is the scene cloud
// for PPF voting.
func DepthCloud(depth []float32, intr Intrinsics, colors []RGB, mask []bool, opt DepthCloudOptions) (*Cloud, error) {
	if err := intr.Validate(); err != nil {
		return nil, fmt.Errorf("mesh: depth cloud: %w", err)
	}
	w, h := intr.Width, intr.Height
	if len(depth) != w*h {
		return nil, fmt.Errorf("mesh: depth cloud: %d depth values for a %d×%d image", len(depth), w, h)
	}
	if colors != nil && len(colors) != w*h {
		return nil, fmt.Errorf("mesh: depth cloud: %d colours for a %d×%d image", len(colors), w, h)
	}
	if mask != nil && len(mask) != w*h {
		return nil, fmt.Errorf("mesh: depth cloud: %d mask values for a %d×%d image", len(mask), w, h)
	}
	if opt.Window < 1 || opt.Window > 32 {
		return nil, fmt.Errorf("mesh: depth cloud: window half-width %d, want 1..32", opt.Window)
	}
	if !(opt.MaxJump > 0) || !(opt.MinDepth >= 0) || !(opt.MaxDepth >= 0) || !(opt.Spacing >= 0) {
		return nil, fmt.Errorf("mesh: depth cloud: invalid options %+v", opt)
	}
	maxDepth := opt.MaxDepth
	if maxDepth == 0 {
		maxDepth = math.Inf(1)
	}
	valid := func(i int) bool {
		z := float64(depth[i])
		return z > 0 && z >= opt.MinDepth && z <= maxDepth && !math.IsInf(z, 0) && (mask == nil || mask[i])
	}
	pix := make([]int32, 0, w*h/4)
	pts := make([]r3.Vec, 0, w*h/4)
	for i := range depth {
		if valid(i) {
			pix = append(pix, int32(i))
			pts = append(pts, intr.BackProject(float64(i%w), float64(i/w), float64(depth[i])))
		}
	}
	keep := make([]int, len(pts))
	for i := range keep {
		keep[i] = i
	}
	if opt.Spacing > 0 {
		var err error
		if keep, err = Thin(pts, opt.Spacing); err != nil {
			return nil, fmt.Errorf("mesh: depth cloud: %w", err)
		}
	}
	normals := make([]r3.Vec, len(keep))
	const chunk = 512
	par.For((len(keep)+chunk-1)/chunk, 0, func(c int) {
		for k := c * chunk; k < min(len(keep), (c+1)*chunk); k++ {
			p := pts[keep[k]]
			i := int(pix[keep[k]])
			u, v := i%w, i/w
			r := opt.MaxJump * float64(opt.Window) * p.Z / intr.Fx
			r2 := r * r
			var acc covAccumulator
			for y := max(0, v-opt.Window); y <= min(h-1, v+opt.Window); y++ {
				for x := max(0, u-opt.Window); x <= min(w-1, u+opt.Window); x++ {
					j := y*w + x
					if !valid(j) {
						continue
					}
					q := intr.BackProject(float64(x), float64(y), float64(depth[j]))
					dx, dy, dz := q.X-p.X, q.Y-p.Y, q.Z-p.Z
					if dx*dx+dy*dy+dz*dz <= r2 {
						acc.add(q)
					}
				}
			}
			if acc.n < max(3, opt.MinNeighbors) {
				continue // zero normal: dropped below
			}
			n := acc.normal()
			if r3.Dot(n, p) > 0 {
				n = r3.Scale(-1, n)
			}
			normals[k] = n
		}
	})
	out := &Cloud{}
	if colors != nil {
		out.Colors = []RGB{}
	}
	for k, idx := range keep {
		if normals[k] == (r3.Vec{}) {
			continue
		}
		out.Points = append(out.Points, pts[idx])
		out.Normals = append(out.Normals, normals[k])
		if colors != nil {
			out.Colors = append(out.Colors, colors[pix[idx]])
		}
	}
	return out, nil
}
