package mesh

// Isosurface extraction by marching cubes (Lorensen & Cline 1987,
// "Marching cubes: a high resolution 3D surface construction
// algorithm", SIGGRAPH, doi:10.1145/37402.37422), with ambiguous faces
// resolved by the asymptotic decider (Nielson & Hamann 1991, "The
// asymptotic decider: resolving the ambiguity in marching cubes", IEEE
// Visualization '91; doi:10.1109/VISUAL.1991.175782, recalled from
// memory). The case table is
// built by this package from the cell's geometry (mc_table.go); the
// extraction engine is in mc_engine.go.
//
// # Conventions
//
// A lattice value v is inside when v < iso and outside otherwise, so a
// value exactly equal to iso counts as outside. For a signed distance
// (negative inside) and iso = 0 this is the usual convention. Triangles
// are counter-clockwise seen from outside: the right-hand-rule normal,
// like the vertex normals, points toward increasing value.
//
// Every crossed lattice edge (one endpoint inside, the other outside)
// that borders at least one extracted cell gets exactly one vertex,
// keyed by the global lattice edge, which all cells around it share; so
// a closed isosurface gives a closed, consistently oriented mesh with
// every edge shared by exactly two triangles, across block borders too.
// The vertex lies at the linear-interpolation root
// t = (iso − v0)/(v1 − v0) along the edge; its colour interpolates the
// endpoint colours with the same t, and its normal interpolates the
// field's gradient at the endpoints (central differences, one-sided where
// a neighbour is unknown or off the lattice), normalised. Where that
// interpolated gradient vanishes, the normal is the edge direction from
// the inside endpoint to the outside one.
//
// # Ambiguity
//
// A cell face whose inside corners are diagonal is decided by the
// asymptotic decider: the inside corners are joined across the face
// when the bilinear interpolant's saddle value is below iso, i.e. when
// |w_a·w_c| > |w_b·w_d| for the inside pair (a, c) and outside pair
// (b, d) of the face's values w = v − iso (a tie counts as outside, as
// for lattice values). The test reads only the face's four values, in an
// order fixed by the face's position in the lattice, so the two cells
// that share a face always agree: this is what keeps the surface
// crack-free. Ambiguity inside a cell's body is not resolved separately:
// each closed loop of face segments becomes its own patch, so parts of
// the inside joined only through the cell body stay apart.
//
// Most loops are triangulated with edge vertices only. A loop that runs
// through both segments of an ambiguous face and cannot be triangulated
// without a diagonal joining two vertices of one face (116 of the 656
// table entries) is fanned around one extra vertex at the mean of its
// vertices (normal and colour averaged likewise); that vertex belongs to
// its cell alone.
//
// # Unknown values and degenerate output
//
// A NaN or ±Inf lattice value is unknown (an unobserved TSDF voxel, say):
// every cell with an unknown corner is skipped, so the surface can be
// open there, its border running along the faces of the skipped cells.
// A lattice value exactly equal to iso puts the vertices of the crossed
// edges at that lattice point on the point itself, so triangles there
// may have zero area; they are kept so that the mesh stays closed.
// No crossing at all gives an empty mesh, not an error.

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/spatial/r3"
)

// Grid is a scalar field sampled on a regular lattice: lattice point
// (i, j, k) lies at Origin + Spacing·(i, j, k) and holds
// Values[i + Nx*(j + Ny*k)]. NaN (or ±Inf) marks an unknown value.
type Grid struct {
	Origin     r3.Vec
	Spacing    float64
	Nx, Ny, Nz int
	Values     []float32
	Colors     []RGB // nil, or one colour per lattice point, in Values' order
}

// MaxGridPoints bounds the number of lattice points SampleGrid will
// allocate: 2²⁶ points are 256 MiB of values (and 192 MiB of colours),
// a 406³ grid.
const MaxGridPoints = 1 << 26

// maxGridSide bounds each grid dimension so that products of dimensions
// never overflow.
const maxGridSide = 1 << 21

// BlockSize is the edge length, in lattice points, of a Block, and of
// the tiles the extraction engine works in.
const BlockSize = 8

// BlockValues is the number of values in a Block.
const BlockValues = BlockSize * BlockSize * BlockSize

// MaxBlockCoord bounds the block coordinates of a BlockVolume
// (|coordinate| ≤ MaxBlockCoord): about ±8 million lattice points, ±8 km
// at 1 mm spacing.
const MaxBlockCoord = 1<<20 - 2

// BlockKey is the integer coordinate of a block: block K holds lattice
// points BlockSize·K + (0…BlockSize−1) along each axis.
type BlockKey struct{ X, Y, Z int32 }

// Block is one BlockSize³ brick of a sparse lattice.
type Block struct {
	Key BlockKey
	// Values holds BlockValues values, x fastest, then y, then z: the
	// point at offset (x, y, z) inside the block is
	// Values[x + BlockSize*(y + BlockSize*z)]. NaN marks unknown.
	Values []float32
	// Colors is nil, or BlockValues colours in Values' order. Either
	// every block of a volume has colours or none has.
	Colors []RGB
}

// BlockVolume is a sparse lattice made of blocks: lattice point
// (i, j, k) lies at Origin + Spacing·(i, j, k). Lattice points in no
// block are unknown.
//
// A TSDF kept as a hash map of 8³ voxel blocks (Nießner, Zollhöfer,
// Izadi & Stamminger 2013, voxel hashing, ACM TOG 32(6),
// doi:10.1145/2508363.2508374) is extracted by listing its blocks here,
// in any order, with iso = 0: Values holds each voxel's signed distance
// in the block's x-fastest order, NaN where the voxel's weight is zero
// (so that unobserved voxels open the surface instead of inventing
// one), and Colors its colour. MarchBlocks reads these slices, never
// keeps or changes them, and copies no values beyond a 11³ scratch
// window per worker.
type BlockVolume struct {
	Origin  r3.Vec
	Spacing float64
	Blocks  []Block
}

// IsoOptions tunes isosurface extraction.
type IsoOptions struct {
	// Workers is the number of goroutines that extract blocks in
	// parallel; the output is identical for every value.
	// DEFAULT: 0, meaning runtime.GOMAXPROCS(0).
	Workers int
}

// DefaultIsoOptions returns the default IsoOptions.
func DefaultIsoOptions() IsoOptions { return IsoOptions{} }

func (o IsoOptions) workers() int {
	if o.Workers > 0 {
		return o.Workers
	}
	return runtime.GOMAXPROCS(0)
}

// MarchingCubes extracts the iso level set of g as a triangle mesh with
// per-vertex normals (and colours when g has them), using the default
// options; see MarchGrid.
func MarchingCubes(g *Grid, iso float32) (*Mesh, error) {
	return MarchGrid(g, iso, DefaultIsoOptions())
}

// MarchGrid extracts the iso level set of g as a triangle mesh with
// per-vertex unit normals, and colours when g has them. Every cell whose
// eight corners are known is extracted. It returns an error for a grid
// whose sizes are inconsistent or whose spacing, origin or iso are not
// finite; a grid with no crossing gives an empty mesh. The output is
// the same for every opt.Workers and equals MarchBlocks on the same
// lattice split into blocks.
func MarchGrid(g *Grid, iso float32, opt IsoOptions) (*Mesh, error) {
	if err := g.validate(); err != nil {
		return nil, err
	}
	if err := checkIso(iso); err != nil {
		return nil, err
	}
	src := &gridSource{g: g,
		tx: ceilDiv(g.Nx, BlockSize), ty: ceilDiv(g.Ny, BlockSize), tz: ceilDiv(g.Nz, BlockSize)}
	if g.Nx < 2 || g.Ny < 2 || g.Nz < 2 {
		src.tx, src.ty, src.tz = 0, 0, 0
	}
	return runMC(src, g.Origin, g.Spacing, iso, opt.workers())
}

// MarchBlocks extracts the iso level set of a sparse block lattice:
// every cell whose eight corners are known (all in listed blocks, none
// NaN) is extracted, including the cells that straddle block borders,
// and vertices on block borders are shared, so the result is the same
// mesh, in the same order, that MarchGrid gives for a dense grid holding
// the same values. It returns an error for a duplicate key, a key
// beyond MaxBlockCoord, a slice of the wrong length, colours on some
// blocks only, or a non-finite spacing, origin or iso.
func MarchBlocks(v *BlockVolume, iso float32, opt IsoOptions) (*Mesh, error) {
	if v == nil {
		return nil, errors.New("mesh: nil block volume")
	}
	if err := checkLatticeFrame(v.Origin, v.Spacing); err != nil {
		return nil, err
	}
	if err := checkIso(iso); err != nil {
		return nil, err
	}
	src, err := newBlockSource(v.Blocks)
	if err != nil {
		return nil, err
	}
	return runMC(src, v.Origin, v.Spacing, iso, opt.workers())
}

func checkIso(iso float32) error {
	if math.IsNaN(float64(iso)) || math.IsInf(float64(iso), 0) {
		return fmt.Errorf("mesh: iso level %v is not finite", iso)
	}
	return nil
}

func checkLatticeFrame(origin r3.Vec, spacing float64) error {
	if !(spacing > 0) || math.IsInf(spacing, 1) {
		return fmt.Errorf("mesh: lattice spacing %v is not a positive finite number", spacing)
	}
	for _, c := range [3]float64{origin.X, origin.Y, origin.Z} {
		if math.IsNaN(c) || math.IsInf(c, 0) {
			return fmt.Errorf("mesh: lattice origin %v is not finite", origin)
		}
	}
	return nil
}

func (g *Grid) validate() error {
	if g == nil {
		return errors.New("mesh: nil grid")
	}
	if err := checkLatticeFrame(g.Origin, g.Spacing); err != nil {
		return err
	}
	for _, d := range [3]int{g.Nx, g.Ny, g.Nz} {
		if d < 0 || d > maxGridSide {
			return fmt.Errorf("mesh: grid size %d×%d×%d: each side must be in [0, %d]", g.Nx, g.Ny, g.Nz, maxGridSide)
		}
	}
	n := int64(g.Nx) * int64(g.Ny) * int64(g.Nz)
	if int64(len(g.Values)) != n {
		return fmt.Errorf("mesh: grid %d×%d×%d needs %d values, has %d", g.Nx, g.Ny, g.Nz, n, len(g.Values))
	}
	if g.Colors != nil && int64(len(g.Colors)) != n {
		return fmt.Errorf("mesh: grid %d×%d×%d needs %d colours, has %d", g.Nx, g.Ny, g.Nz, n, len(g.Colors))
	}
	return nil
}

func ceilDiv(a, b int) int { return (a + b - 1) / b }

// SampleGrid samples f on the lattice with the given spacing whose first
// point is lo and whose last point along each axis is the first at or
// beyond hi (so the grid covers the box [lo, hi]), and colour, when not nil,
// likewise. f and color are called concurrently from several goroutines
// (slices of constant z are shared out) and must be safe for that; f may
// return NaN for an unknown value. It returns an error for a non-finite
// or inverted box, a spacing that is not positive and finite, or a grid
// of more than MaxGridPoints points.
func SampleGrid(f func(r3.Vec) float64, color func(r3.Vec) RGB, lo, hi r3.Vec, spacing float64) (*Grid, error) {
	if f == nil {
		return nil, errors.New("mesh: SampleGrid needs a field function")
	}
	if err := checkLatticeFrame(lo, spacing); err != nil {
		return nil, err
	}
	var n [3]int
	l := [3]float64{lo.X, lo.Y, lo.Z}
	u := [3]float64{hi.X, hi.Y, hi.Z}
	total := 1.0
	for a := 0; a < 3; a++ {
		if math.IsNaN(u[a]) || math.IsInf(u[a], 0) {
			return nil, fmt.Errorf("mesh: SampleGrid box corner %v is not finite", hi)
		}
		if u[a] < l[a] {
			return nil, fmt.Errorf("mesh: SampleGrid box %v–%v is inverted along axis %d", lo, hi, a)
		}
		// A small relative slack keeps a side that is a whole number of
		// spacings from gaining a point to rounding.
		steps := math.Ceil((u[a]-l[a])/spacing - 1e-9)
		if steps < 0 {
			steps = 0
		}
		total *= steps + 1
		if total > MaxGridPoints {
			return nil, fmt.Errorf("mesh: SampleGrid box %v–%v at spacing %v needs more than %d lattice points", lo, hi, spacing, MaxGridPoints)
		}
		n[a] = int(steps) + 1
	}
	g := &Grid{Origin: lo, Spacing: spacing, Nx: n[0], Ny: n[1], Nz: n[2]}
	g.Values = make([]float32, n[0]*n[1]*n[2])
	if color != nil {
		g.Colors = make([]RGB, len(g.Values))
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := min(runtime.GOMAXPROCS(0), g.Nz); w > 0; w-- {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				k := int(next.Add(1) - 1)
				if k >= g.Nz {
					return
				}
				base := k * g.Nx * g.Ny
				for j := 0; j < g.Ny; j++ {
					for i := 0; i < g.Nx; i++ {
						p := r3.Vec{
							X: lo.X + spacing*float64(i),
							Y: lo.Y + spacing*float64(j),
							Z: lo.Z + spacing*float64(k),
						}
						idx := base + i + g.Nx*j
						g.Values[idx] = float32(f(p))
						if color != nil {
							g.Colors[idx] = color(p)
						}
					}
				}
			}
		}()
	}
	wg.Wait()
	return g, nil
}
