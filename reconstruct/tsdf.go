package reconstruct

import (
	"context"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/internal/par"
	"github.com/scanfold/scanfold/mesh"
)

// BlockSide is the number of voxels along each edge of a TSDF block
// (8³ voxels per block, as in voxel hashing: Nießner, Zollhöfer, Izadi &
// Stamminger 2013, ACM TOG 32(6), DOI 10.1145/2508363.2508374).
const BlockSide = 8

const blockVoxels = BlockSide * BlockSide * BlockSide

// maxBlocks bounds the volume's memory: 2²¹ blocks of 10 KiB is 20 GiB,
// more than any part scan needs; a volume that grows past it is a sign
// of a wrong depth unit or a missing region of interest.
const maxBlocks = 1 << 21

// BlockKey addresses a block by its integer coordinates: block (x, y, z)
// holds the voxels (8x … 8x+7, 8y … 8y+7, 8z … 8z+7).
type BlockKey struct{ X, Y, Z int32 }

// Block holds the voxels of one 8³ block, x fastest: voxel (i, j, k)
// is at index i + 8·(j + 8·k).
type Block struct {
	// D is the truncated signed distance divided by the truncation
	// distance, in [−1, 1]; positive in front of the surface (free
	// space), negative behind it.
	D [blockVoxels]float32
	// W is the accumulated measurement weight; 0 means unobserved.
	W [blockVoxels]float32
	// C is the weighted mean colour, 0–255 per channel.
	C [blockVoxels][3]float32
}

// TSDFOptions configures a Volume.
type TSDFOptions struct {
	// VoxelSize is the edge of a voxel (metres).
	// DEFAULT: 0.002
	VoxelSize float64
	// Truncation μ: signed distances are clamped to [−μ, μ] and voxels
	// more than μ behind a measurement are not updated (metres). 0 means
	// 4 voxels, enough to hold ±3σ of the axial noise of a structured-light
	// sensor at 0.5 m (σ ≈ 1.2 mm, Nguyen et al. 2012) at 2 mm voxels.
	// DEFAULT: 0 (4 × VoxelSize)
	Truncation float64
	// MaxWeight caps the accumulated weight per voxel, so that the volume
	// keeps adapting (Curless & Levoy 1996). Weights are relative to a
	// face-on measurement at 0.5 m, which weighs 1.
	// DEFAULT: 128
	MaxWeight float32
	// MinDepth and MaxDepth bound the depths used (metres).
	// DEFAULT: 0.1, 3
	MinDepth, MaxDepth float64
	// AllocStride samples every n-th pixel in both directions when
	// allocating blocks along the truncation band. Blocks are 8 voxels
	// wide, far wider than a pixel's footprint at part distances, so 2
	// misses nothing.
	// DEFAULT: 2
	AllocStride int
	// Workers bounds the goroutines used by Integrate; 0 means
	// runtime.GOMAXPROCS(0). The result does not depend on it.
	// DEFAULT: 0
	Workers int
}

// DefaultTSDFOptions returns the documented defaults.
func DefaultTSDFOptions() TSDFOptions {
	return TSDFOptions{VoxelSize: 0.002, MaxWeight: 128, MinDepth: 0.1, MaxDepth: 3, AllocStride: 2}
}

// Volume is a sparse truncated signed distance field with colour
// (Curless & Levoy 1996, "A volumetric method for building complex models
// from range images", SIGGRAPH, DOI 10.1145/237170.237269) stored in 8³
// blocks allocated only along the truncation band of each depth ray
// (Nießner et al. 2013). Voxel (i, j, k) lies at world point
// VoxelSize·(i, j, k): voxels are lattice points, which is what marching
// cubes samples.
//
// Blocks are kept in allocation order behind a hash index; while the
// box around them stays small (maxGridCells), a dense array over that
// box indexes them too, so that raycasting and allocation find a block
// by arithmetic instead of hashing.
//
// A Volume is not safe for concurrent use; Integrate parallelises
// internally.
type Volume struct {
	opt    TSDFOptions
	mu     float64 // truncation, metres
	index  map[BlockKey]int32
	keys   []BlockKey // allocation order; blocks[i] is at keys[i]
	blocks []*Block
	masks  []voxelMask // masks[i] marks the observed voxels of blocks[i]
	slab   []Block     // blocks are carved from slabs to spare the allocator
	lo, hi BlockKey    // box around the allocated blocks
	grid   blockGrid
	// scratch reused between frames
	pending  []BlockKey
	bandKeys [][]BlockKey // allocate's new keys, per band of rows
	visible  []int32
	counts   []int
	noCull   bool // tests: integrate without culling blocks seen from behind
}

// voxelMask has one bit per voxel of a block (bit i%64 of word i/64 for
// voxel index i), set once the voxel has been observed (W > 0; weights
// never return to 0). At 64 bytes a block it stays in cache where the
// weights would not, so raycasting tests it before reading distances.
type voxelMask [blockVoxels / 64]uint64

// slabBlocks is how many blocks are allocated at once.
const slabBlocks = 32

// maxGridCells bounds the dense block index (4 bytes a cell): 2²³ cells
// is 32 MiB, a box of 200³ blocks, 3.2 m across at 2 mm voxels.
const maxGridCells = 1 << 23

// blockGrid indexes the blocks of a box of block keys densely: cell
// (x, y, z) holds 1 + the block's position in Volume.blocks, 0 for none.
// A coarser grid counts the blocks of each group of groupSide³ blocks
// (groups aligned on multiples of groupSide), so that a ray can leap
// over a whole empty group.
type blockGrid struct {
	ok            bool
	lo            BlockKey
	nx, ny, nz    int32
	cells         []int32
	glo           BlockKey // group key of the coarse grid's first cell
	gnx, gny, gnz int32
	groups        []int32
}

// groupSide is the side of a block group, in blocks: 4 (64 mm at 2 mm
// voxels) leaps far over empty space yet still fits around parts.
const groupSide = 4

// groupOf returns the key of the group holding block k.
func groupOf(k BlockKey) BlockKey { return BlockKey{k.X >> 2, k.Y >> 2, k.Z >> 2} }

// groupEmpty reports whether the group holding block k has no block.
func (g *blockGrid) groupEmpty(k BlockKey) bool {
	c := groupOf(k)
	x, y, z := c.X-g.glo.X, c.Y-g.glo.Y, c.Z-g.glo.Z
	if uint32(x) >= uint32(g.gnx) || uint32(y) >= uint32(g.gny) || uint32(z) >= uint32(g.gnz) {
		return true
	}
	return g.groups[int(x)+int(g.gnx)*(int(y)+int(g.gny)*int(z))] == 0
}

func (g *blockGrid) countGroup(k BlockKey) {
	c := groupOf(k)
	x, y, z := c.X-g.glo.X, c.Y-g.glo.Y, c.Z-g.glo.Z
	g.groups[int(x)+int(g.gnx)*(int(y)+int(g.gny)*int(z))]++
}

// inner returns the cell of block k when k lies inside the grid with a
// cell to spare on every side (so its 26 neighbours have cells too).
func (g *blockGrid) inner(k BlockKey) (int, bool) {
	x, y, z := k.X-g.lo.X-1, k.Y-g.lo.Y-1, k.Z-g.lo.Z-1
	if uint32(x) >= uint32(g.nx-2) || uint32(y) >= uint32(g.ny-2) || uint32(z) >= uint32(g.nz-2) {
		return 0, false
	}
	return int(x+1) + int(g.nx)*(int(y+1)+int(g.ny)*int(z+1)), true
}

func (g *blockGrid) cell(k BlockKey) (int, bool) {
	x, y, z := k.X-g.lo.X, k.Y-g.lo.Y, k.Z-g.lo.Z
	if uint32(x) >= uint32(g.nx) || uint32(y) >= uint32(g.ny) || uint32(z) >= uint32(g.nz) {
		return 0, false
	}
	return int(x) + int(g.nx)*(int(y)+int(g.ny)*int(z)), true
}

// NewVolume returns an empty volume.
func NewVolume(opt TSDFOptions) (*Volume, error) {
	if !(opt.VoxelSize > 0) || opt.VoxelSize > 0.1 {
		return nil, fmt.Errorf("reconstruct: voxel size %v m out of range (0, 0.1]", opt.VoxelSize)
	}
	if opt.Truncation == 0 {
		opt.Truncation = 4 * opt.VoxelSize
	}
	if opt.Truncation < opt.VoxelSize || opt.Truncation > BlockSide*opt.VoxelSize {
		return nil, fmt.Errorf("reconstruct: truncation %v m must be between one voxel (%v m) and one block (%v m)", opt.Truncation, opt.VoxelSize, BlockSide*opt.VoxelSize)
	}
	if !(opt.MaxWeight > 0) {
		return nil, fmt.Errorf("reconstruct: max weight %v must be positive", opt.MaxWeight)
	}
	if !(opt.MinDepth >= 0 && opt.MaxDepth > opt.MinDepth) {
		return nil, fmt.Errorf("reconstruct: depth range [%v, %v] m is empty", opt.MinDepth, opt.MaxDepth)
	}
	if opt.AllocStride < 1 {
		opt.AllocStride = 1
	}
	return &Volume{
		opt:   opt,
		mu:    opt.Truncation,
		index: make(map[BlockKey]int32),
	}, nil
}

// Options returns the volume's options with defaults resolved.
func (v *Volume) Options() TSDFOptions { return v.opt }

// NumBlocks returns the number of allocated blocks.
func (v *Volume) NumBlocks() int { return len(v.blocks) }

// Block returns the block at key, or nil. The block is the volume's own:
// read it, do not write it (raycasting keeps its own record of which
// voxels are observed).
func (v *Volume) Block(key BlockKey) *Block { return v.lookup(key) }

// lookup returns the block at key, or nil.
func (v *Volume) lookup(key BlockKey) *Block {
	if i := v.position(key); i >= 0 {
		return v.blocks[i]
	}
	return nil
}

// position returns the position of the block at key in v.blocks, or −1:
// through the dense grid when there is one, else the hash index.
func (v *Volume) position(key BlockKey) int32 {
	if v.grid.ok {
		c, in := v.grid.cell(key)
		if !in {
			return -1
		}
		return v.grid.cells[c] - 1
	}
	if i, ok := v.index[key]; ok {
		return i
	}
	return -1
}

// Keys returns the allocated block keys in a fixed (sorted) order.
func (v *Volume) Keys() []BlockKey {
	keys := slices.Clone(v.keys)
	slices.SortFunc(keys, compareKeys)
	return keys
}

func compareKeys(a, b BlockKey) int {
	if a.Z != b.Z {
		return int(a.Z) - int(b.Z)
	}
	if a.Y != b.Y {
		return int(a.Y) - int(b.Y)
	}
	return int(a.X) - int(b.X)
}

// addBlocks allocates zeroed blocks at keys (none allocated yet) and
// keeps the grid in step.
func (v *Volume) addBlocks(keys []BlockKey) error {
	if len(v.blocks)+len(keys) > maxBlocks {
		blockLen := v.opt.VoxelSize * BlockSide
		return fmt.Errorf("reconstruct: the volume passed %d blocks of %.1f mm; the scene is far larger than a part (check the depth unit and the region of interest)", maxBlocks, blockLen*1000)
	}
	outside := false
	for _, k := range keys {
		if len(v.slab) == 0 {
			v.slab = make([]Block, slabBlocks)
		}
		b := &v.slab[0]
		v.slab = v.slab[1:]
		if len(v.blocks) == 0 {
			v.lo, v.hi = k, k
		} else {
			v.lo = BlockKey{min(v.lo.X, k.X), min(v.lo.Y, k.Y), min(v.lo.Z, k.Z)}
			v.hi = BlockKey{max(v.hi.X, k.X), max(v.hi.Y, k.Y), max(v.hi.Z, k.Z)}
		}
		v.index[k] = int32(len(v.blocks))
		v.keys = append(v.keys, k)
		v.blocks = append(v.blocks, b)
		v.masks = append(v.masks, voxelMask{})
		if c, in := v.grid.inner(k); in && v.grid.ok {
			v.grid.cells[c] = int32(len(v.blocks))
			v.grid.countGroup(k)
		} else {
			outside = true
		}
	}
	if outside {
		v.rebuildGrid()
	}
	return nil
}

// rebuildGrid lays the dense index over the blocks' box widened by a
// margin of at least two blocks (so that a growing volume rebuilds it
// rarely, and every block's neighbours have cells), or drops it when
// that box would pass maxGridCells.
func (v *Volume) rebuildGrid() {
	g := &v.grid
	g.ok = false
	if len(v.blocks) == 0 {
		return
	}
	margin := func(lo, hi int32) (int32, int32) {
		m := max(2, (hi-lo+1)/4)
		return lo - m, hi + m
	}
	x0, x1 := margin(v.lo.X, v.hi.X)
	y0, y1 := margin(v.lo.Y, v.hi.Y)
	z0, z1 := margin(v.lo.Z, v.hi.Z)
	nx, ny, nz := int64(x1-x0+1), int64(y1-y0+1), int64(z1-z0+1)
	if nx*ny*nz > maxGridCells {
		g.cells = nil
		return
	}
	n := int(nx * ny * nz)
	if cap(g.cells) >= n {
		g.cells = g.cells[:n]
		clear(g.cells)
	} else {
		g.cells = make([]int32, n)
	}
	g.lo = BlockKey{x0, y0, z0}
	g.nx, g.ny, g.nz = int32(nx), int32(ny), int32(nz)
	g.glo = groupOf(g.lo)
	ghi := groupOf(BlockKey{x1, y1, z1})
	g.gnx, g.gny, g.gnz = ghi.X-g.glo.X+1, ghi.Y-g.glo.Y+1, ghi.Z-g.glo.Z+1
	ng := int(g.gnx) * int(g.gny) * int(g.gnz)
	if cap(g.groups) >= ng {
		g.groups = g.groups[:ng]
		clear(g.groups)
	} else {
		g.groups = make([]int32, ng)
	}
	for i, k := range v.keys {
		c, _ := g.cell(k)
		g.cells[c] = int32(i + 1)
		g.countGroup(k)
	}
	g.ok = true
}

// DepthImage is one depth measurement with optional colour, as
// Integrate takes it.
type DepthImage struct {
	Intr  mesh.Intrinsics
	Depth []float32 // metres along z, 0 = no measurement; row-major
	// Color is nil or RGB, 3 bytes per pixel, row-major.
	Color []uint8
	// Weight is nil (every measurement weighs 1) or the weight of each
	// pixel's measurement, 0 to ignore it; see MeasurementWeights.
	Weight []float32
	// Behind is nil (voxels are updated out to the truncation μ behind
	// the measured surface) or, per pixel, how far behind the surface
	// along the ray voxels are updated (metres; see MeasurementBands).
	// A narrow band behind the surface keeps a thin wall seen from both
	// sides from thickening: one side's "behind" must not overwrite the
	// other side's free space (Curless & Levoy 1996 ramp the weight down
	// behind the surface for the same reason).
	Behind []float32
	// Alloc is nil (allocate along every valid pixel) or marks the pixels
	// whose truncation bands may allocate new blocks: the region of
	// interest. Pixels outside it still update blocks that exist.
	Alloc []bool
}

func (im *DepthImage) check() error {
	n := im.Intr.Width * im.Intr.Height
	if err := im.Intr.Validate(); err != nil {
		return fmt.Errorf("reconstruct: %w", err)
	}
	if len(im.Depth) != n {
		return fmt.Errorf("reconstruct: depth has %d pixels, intrinsics say %d×%d", len(im.Depth), im.Intr.Width, im.Intr.Height)
	}
	if im.Color != nil && len(im.Color) != 3*n {
		return fmt.Errorf("reconstruct: colour has %d bytes, want %d for %d×%d RGB", len(im.Color), 3*n, im.Intr.Width, im.Intr.Height)
	}
	if im.Weight != nil && len(im.Weight) != n {
		return fmt.Errorf("reconstruct: %d weights for %d pixels", len(im.Weight), n)
	}
	if im.Behind != nil && len(im.Behind) != n {
		return fmt.Errorf("reconstruct: %d behind-bands for %d pixels", len(im.Behind), n)
	}
	if im.Alloc != nil && len(im.Alloc) != n {
		return fmt.Errorf("reconstruct: allocation mask has %d pixels, want %d", len(im.Alloc), n)
	}
	return nil
}

// IntegrateStats tells what one Integrate call did.
type IntegrateStats struct {
	NewBlocks     int // blocks allocated by this frame
	UpdatedBlocks int // blocks in the frustum that were visited
	Updates       int // voxel updates
}

// Integrate fuses one depth image taken from camToWorld into the volume
// by the weighted running averages of Curless & Levoy (1996):
// D ← (W·D + w·d)/(W + w), W ← min(W + w, MaxWeight), the colour
// averaged with the same weights. d is the signed distance along the
// line of sight from the voxel to the measured surface, divided by the
// truncation μ and clamped to 1; voxels more than μ behind the surface
// are left alone. Blocks are first allocated along [depth − μ, depth + μ]
// of each pixel in im.Alloc, then every allocated block inside the view
// frustum is updated voxel by voxel, in parallel over blocks (each voxel
// is written by one goroutine, so the result does not depend on the
// number of workers).
func (v *Volume) Integrate(ctx context.Context, im *DepthImage, camToWorld mesh.Pose) (IntegrateStats, error) {
	if err := im.check(); err != nil {
		return IntegrateStats{}, err
	}
	var st IntegrateStats
	n, err := v.allocate(im, camToWorld)
	if err != nil {
		return st, err
	}
	st.NewBlocks = n
	worldToCam := camToWorld.Inv()
	v.visible = v.frustumBlocks(v.visible[:0], im.Intr, worldToCam)
	st.UpdatedBlocks = len(v.visible)
	const chunk = 8
	nc := (len(v.visible) + chunk - 1) / chunk
	if cap(v.counts) < nc {
		v.counts = make([]int, nc)
	}
	counts := v.counts[:nc]
	clear(counts)
	pr := v.newProjector(im, worldToCam)
	par.For(nc, v.opt.Workers, func(c int) {
		if ctx.Err() != nil {
			return
		}
		for _, i := range v.visible[c*chunk : min((c+1)*chunk, len(v.visible))] {
			counts[c] += pr.integrateBlock(v.keys[i], v.blocks[i], &v.masks[i])
		}
	})
	if err := ctx.Err(); err != nil {
		return st, err
	}
	for _, c := range counts {
		st.Updates += c
	}
	return st, nil
}

// AllocReach is how far from the measured surface point of a pixel that
// allocates blocks a voxel of those blocks can lie: the truncation μ
// along the ray to the band's sample, plus a block's diagonal. Every
// voxel of a volume whose blocks were all allocated from pixels whose
// points lie in a region is within AllocReach of that region.
func (v *Volume) AllocReach() float64 {
	return v.mu + math.Sqrt(3)*v.opt.VoxelSize*BlockSide
}

// KeyOf returns the key of the block holding world point p.
func (v *Volume) KeyOf(p r3.Vec) BlockKey {
	s := v.opt.VoxelSize * BlockSide
	return BlockKey{int32(math.Floor(p.X / s)), int32(math.Floor(p.Y / s)), int32(math.Floor(p.Z / s))}
}

// allocBandRows is how many sampled rows of an image allocate gives
// one goroutine at a time.
const allocBandRows = 8

// allocate creates the blocks that the truncation bands of im.Alloc's
// pixels pass through and returns how many it created. The rows are
// shared among the volume's workers, which only read the volume; the
// keys they find are then sorted and allocated in key order, so the
// volume's layout depends neither on the number of workers nor on
// their timing.
func (v *Volume) allocate(im *DepthImage, camToWorld mesh.Pose) (int, error) {
	k := im.Intr
	stride := v.opt.AllocStride
	blockLen := v.opt.VoxelSize * BlockSide
	// Sample the band every quarter block: a segment of length 2μ ≤ one
	// block crosses at most three block planes, and a quarter-block step
	// visits every block it passes through by more than a quarter block.
	steps := int(math.Ceil(2*v.mu/(blockLen/4))) + 1
	minD, maxD := v.opt.MinDepth, v.opt.MaxDepth
	rot, org := camToWorld.R, camToWorld.T
	rows := (k.Height + stride - 1) / stride
	nb := (rows + allocBandRows - 1) / allocBandRows
	for len(v.bandKeys) < nb {
		v.bandKeys = append(v.bandKeys, nil)
	}
	par.For(nb, v.opt.Workers, func(b int) {
		keys := v.bandKeys[b][:0]
		for r := b * allocBandRows; r < min(rows, (b+1)*allocBandRows); r++ {
			y := r * stride
			ry := (float64(y) - k.Cy) / k.Fy
			for x := 0; x < k.Width; x += stride {
				i := y*k.Width + x
				if im.Alloc != nil && !im.Alloc[i] {
					continue
				}
				d := float64(im.Depth[i])
				if !(d >= minD && d <= maxD) {
					continue
				}
				if im.Weight != nil && !(im.Weight[i] > 0) {
					continue
				}
				ray := r3.Vec{X: (float64(x) - k.Cx) / k.Fx, Y: ry, Z: 1}
				scale := v.mu / math.Sqrt(ray.X*ray.X+ray.Y*ray.Y+1) // the band is ±μ along the ray
				wr := rot.MulVec(ray)
				last := BlockKey{math.MaxInt32, 0, 0}
				for s := 0; s < steps; s++ {
					t := d - scale + 2*scale*float64(s)/float64(steps-1)
					key := v.KeyOf(r3.Add(org, r3.Scale(t, wr)))
					if key == last {
						continue
					}
					last = key
					if v.lookup(key) == nil {
						keys = append(keys, key)
					}
				}
			}
		}
		v.bandKeys[b] = keys
	})
	v.pending = v.pending[:0]
	for _, keys := range v.bandKeys[:nb] {
		v.pending = append(v.pending, keys...)
	}
	if len(v.pending) == 0 {
		return 0, nil
	}
	slices.SortFunc(v.pending, compareKeys)
	v.pending = slices.Compact(v.pending)
	if err := v.addBlocks(v.pending); err != nil {
		return 0, err
	}
	return len(v.pending), nil
}

// frustumBlocks appends the positions of allocated blocks whose bounding
// sphere meets the view frustum within the depth range.
func (v *Volume) frustumBlocks(dst []int32, k mesh.Intrinsics, worldToCam mesh.Pose) []int32 {
	blockLen := v.opt.VoxelSize * BlockSide
	radius := blockLen * math.Sqrt(3) / 2
	for i, key := range v.keys {
		c := r3.Vec{X: (float64(key.X) + 0.5) * blockLen, Y: (float64(key.Y) + 0.5) * blockLen, Z: (float64(key.Z) + 0.5) * blockLen}
		p := worldToCam.Apply(c)
		if p.Z+radius < v.opt.MinDepth || p.Z-radius > v.opt.MaxDepth+v.mu {
			continue
		}
		z := max(p.Z, v.opt.MinDepth)
		u, vv := k.Fx*p.X/z+k.Cx, k.Fy*p.Y/z+k.Cy
		mu, mv := k.Fx*radius/z+1, k.Fy*radius/z+1
		if u < -mu || u > float64(k.Width)+mu || vv < -mv || vv > float64(k.Height)+mv {
			continue
		}
		dst = append(dst, int32(i))
	}
	return dst
}

// projector holds what integrateBlock needs of one frame, unpacked into
// scalars for the voxel loop.
type projector struct {
	im                     *DepthImage
	worldToCam             mesh.Pose
	ex, ey, ez             r3.Vec // one voxel step along x, y, z, camera frame
	vs, mu                 float64
	invMu, maxW            float32
	minD, maxD             float64
	fx, fy, cx, cy, fw, fh float64
	w                      int
	noCull                 bool // tests: project every block
}

func (v *Volume) newProjector(im *DepthImage, worldToCam mesh.Pose) *projector {
	k := im.Intr
	vs := v.opt.VoxelSize
	return &projector{
		im: im, worldToCam: worldToCam,
		ex: r3.Scale(vs, worldToCam.R.Col(0)), ey: r3.Scale(vs, worldToCam.R.Col(1)), ez: r3.Scale(vs, worldToCam.R.Col(2)),
		vs: vs, mu: v.mu, invMu: float32(1 / v.mu), maxW: v.opt.MaxWeight,
		minD: v.opt.MinDepth, maxD: v.opt.MaxDepth,
		fx: k.Fx, fy: k.Fy, cx: k.Cx, cy: k.Cy, fw: float64(k.Width), fh: float64(k.Height),
		w: k.Width, noCull: v.noCull,
	}
}

// behindAll reports whether no voxel of the block whose voxel (0, 0, 0)
// lies at camera-frame point base can be updated by this frame: every
// pixel its voxels project to has no usable measurement, or lies more
// than μ in front of the block's nearest voxel. A voxel is updated only
// if its depth is at most d + μ (the signed distance along the ray is at
// least the depth difference), and its pixel lies inside the rectangle
// of the projected corners of the voxels' box (all in front of the
// camera; otherwise nothing is culled). Culling changes no voxel: it
// spares the projection of blocks seen from behind.
func (pr *projector) behindAll(base r3.Vec) bool {
	const last = BlockSide - 1
	u0, u1, v0, v1 := math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)
	zmin := math.Inf(1)
	for c := 0; c < 8; c++ {
		p := base
		if c&1 != 0 {
			p = r3.Add(p, r3.Scale(last, pr.ex))
		}
		if c&2 != 0 {
			p = r3.Add(p, r3.Scale(last, pr.ey))
		}
		if c&4 != 0 {
			p = r3.Add(p, r3.Scale(last, pr.ez))
		}
		if p.Z < pr.minD {
			return false
		}
		zmin = min(zmin, p.Z)
		u, v := pr.fx*p.X/p.Z+pr.cx+0.5, pr.fy*p.Y/p.Z+pr.cy+0.5
		u0, u1 = min(u0, u), max(u1, u)
		v0, v1 = min(v0, v), max(v1, v)
	}
	if u1 < 0 || v1 < 0 || u0 >= pr.fw || v0 >= pr.fh {
		return true // nothing projects into the image
	}
	x0, x1 := max(0, int(math.Floor(u0))), min(pr.w-1, int(u1))
	y0, y1 := max(0, int(math.Floor(v0))), min(int(pr.fh)-1, int(v1))
	limit := float32(zmin - pr.mu) // a pixel deeper than this may update a voxel
	minD, maxD := float32(pr.minD), float32(pr.maxD)
	depth, weight := pr.im.Depth, pr.im.Weight
	for y := y0; y <= y1; y++ {
		row := depth[y*pr.w+x0 : y*pr.w+x1+1]
		for x, d := range row {
			if d >= limit && d >= minD && d <= maxD && (weight == nil || weight[y*pr.w+x0+x] > 0) {
				return false
			}
		}
	}
	return true
}

// integrateBlock updates one block's voxels, marks them observed in
// mask, and returns how many it updated.
func (pr *projector) integrateBlock(key BlockKey, b *Block, mask *voxelMask) int {
	im := pr.im
	vs := pr.vs
	origin := r3.Vec{X: float64(key.X) * BlockSide * vs, Y: float64(key.Y) * BlockSide * vs, Z: float64(key.Z) * BlockSide * vs}
	base := pr.worldToCam.Apply(origin)
	ex, ey, ez := pr.ex, pr.ey, pr.ez
	fx, fy, cx, cy, fw, fh := pr.fx, pr.fy, pr.cx, pr.cy, pr.fw, pr.fh
	minD, maxD, mu, invMu, maxW := pr.minD, pr.maxD, pr.mu, pr.invMu, pr.maxW
	w := pr.w
	depth, weight, behind, color := im.Depth, im.Weight, im.Behind, im.Color
	if !pr.noCull && pr.behindAll(base) {
		return 0
	}
	updates := 0
	idx := 0
	for kz := 0; kz < BlockSide; kz++ {
		pz := r3.Add(base, r3.Scale(float64(kz), ez))
		for jy := 0; jy < BlockSide; jy++ {
			p := r3.Add(pz, r3.Scale(float64(jy), ey))
			for ix := 0; ix < BlockSide; ix, idx, p = ix+1, idx+1, r3.Add(p, ex) {
				if p.Z < minD {
					continue
				}
				inv := 1 / p.Z
				xn, yn := p.X*inv, p.Y*inv
				// Nearest pixel: floor(f·x/z + c + 0.5), tested before the
				// conversion so that the truncation is a floor.
				fu := fx*xn + cx + 0.5
				fv := fy*yn + cy + 0.5
				if !(fu >= 0 && fv >= 0 && fu < fw && fv < fh) {
					continue
				}
				pix := int(fv)*w + int(fu)
				d := float64(depth[pix])
				if !(d >= minD && d <= maxD) {
					continue
				}
				wt := float32(1)
				if weight != nil {
					wt = weight[pix]
					if !(wt > 0) {
						continue
					}
				}
				// Signed distance along the line of sight: the depth
				// difference times the ray's length per unit depth, at
				// least 1, so that a depth difference below −μ needs no
				// square root to be skipped.
				dz := d - p.Z
				if dz < -mu {
					continue
				}
				sdf := dz * math.Sqrt(1+xn*xn+yn*yn)
				if sdf < -mu {
					continue
				}
				if behind != nil && sdf < -float64(behind[pix]) {
					continue
				}
				tsdf := min(float32(sdf)*invMu, 1)
				W := b.W[idx]
				nw := W + wt
				rn := 1 / nw
				b.D[idx] = (W*b.D[idx] + wt*tsdf) * rn
				if color != nil {
					c := color[3*pix : 3*pix+3]
					cc := &b.C[idx]
					cc[0] = (W*cc[0] + wt*float32(c[0])) * rn
					cc[1] = (W*cc[1] + wt*float32(c[1])) * rn
					cc[2] = (W*cc[2] + wt*float32(c[2])) * rn
				}
				b.W[idx] = min(nw, maxW)
				mask[idx>>6] |= 1 << (idx & 63)
				updates++
			}
		}
	}
	return updates
}
