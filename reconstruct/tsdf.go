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
// A Volume is not safe for concurrent use; Integrate parallelises
// internally.
type Volume struct {
	opt    TSDFOptions
	mu     float64 // truncation, metres
	blocks map[BlockKey]*Block
	// scratch reused between frames
	touched map[BlockKey]struct{}
	keys    []BlockKey
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
		opt:     opt,
		mu:      opt.Truncation,
		blocks:  make(map[BlockKey]*Block),
		touched: make(map[BlockKey]struct{}),
	}, nil
}

// Options returns the volume's options with defaults resolved.
func (v *Volume) Options() TSDFOptions { return v.opt }

// NumBlocks returns the number of allocated blocks.
func (v *Volume) NumBlocks() int { return len(v.blocks) }

// Block returns the block at key, or nil.
func (v *Volume) Block(key BlockKey) *Block { return v.blocks[key] }

// Keys returns the allocated block keys in a fixed (sorted) order.
func (v *Volume) Keys() []BlockKey {
	keys := make([]BlockKey, 0, len(v.blocks))
	for k := range v.blocks {
		keys = append(keys, k)
	}
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
	v.keys = v.frustumBlocks(v.keys[:0], im.Intr, worldToCam)
	st.UpdatedBlocks = len(v.keys)
	const chunk = 8
	counts := make([]int, (len(v.keys)+chunk-1)/chunk)
	par.For(len(counts), v.opt.Workers, func(c int) {
		if ctx.Err() != nil {
			return
		}
		for _, k := range v.keys[c*chunk : min((c+1)*chunk, len(v.keys))] {
			counts[c] += v.integrateBlock(k, v.blocks[k], im, worldToCam)
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

// KeyOf returns the key of the block holding world point p.
func (v *Volume) KeyOf(p r3.Vec) BlockKey {
	s := v.opt.VoxelSize * BlockSide
	return BlockKey{int32(math.Floor(p.X / s)), int32(math.Floor(p.Y / s)), int32(math.Floor(p.Z / s))}
}

// allocate creates the blocks that the truncation bands of im.Alloc's
// pixels pass through and returns how many it created.
func (v *Volume) allocate(im *DepthImage, camToWorld mesh.Pose) (int, error) {
	clear(v.touched)
	k := im.Intr
	stride := v.opt.AllocStride
	blockLen := v.opt.VoxelSize * BlockSide
	// Sample the band every quarter block: a segment of length 2μ ≤ one
	// block crosses at most three block planes, and a quarter-block step
	// visits every block it passes through by more than a quarter block.
	steps := int(math.Ceil(2*v.mu/(blockLen/4))) + 1
	for y := 0; y < k.Height; y += stride {
		for x := 0; x < k.Width; x += stride {
			i := y*k.Width + x
			if im.Alloc != nil && !im.Alloc[i] {
				continue
			}
			d := float64(im.Depth[i])
			if !(d >= v.opt.MinDepth && d <= v.opt.MaxDepth) {
				continue
			}
			if im.Weight != nil && !(im.Weight[i] > 0) {
				continue
			}
			ray := k.Ray(float64(x), float64(y))
			scale := v.mu / r3.Norm(ray) // the band is ±μ along the ray
			last := BlockKey{math.MaxInt32, 0, 0}
			for s := 0; s < steps; s++ {
				t := d - scale + 2*scale*float64(s)/float64(steps-1)
				key := v.KeyOf(camToWorld.Apply(r3.Scale(t, ray)))
				if key == last {
					continue
				}
				last = key
				v.touched[key] = struct{}{}
			}
		}
	}
	created := 0
	for key := range v.touched {
		if _, ok := v.blocks[key]; ok {
			continue
		}
		if len(v.blocks) >= maxBlocks {
			return created, fmt.Errorf("reconstruct: the volume passed %d blocks of %.1f mm; the scene is far larger than a part (check the depth unit and the region of interest)", maxBlocks, blockLen*1000)
		}
		v.blocks[key] = new(Block)
		created++
	}
	return created, nil
}

// frustumBlocks appends, in sorted order, the keys of allocated blocks
// whose bounding sphere meets the view frustum within the depth range.
func (v *Volume) frustumBlocks(dst []BlockKey, k mesh.Intrinsics, worldToCam mesh.Pose) []BlockKey {
	blockLen := v.opt.VoxelSize * BlockSide
	radius := blockLen * math.Sqrt(3) / 2
	for key := range v.blocks {
		c := r3.Vec{X: (float64(key.X) + 0.5) * blockLen, Y: (float64(key.Y) + 0.5) * blockLen, Z: (float64(key.Z) + 0.5) * blockLen}
		p := worldToCam.Apply(c)
		if p.Z+radius < v.opt.MinDepth || p.Z-radius > v.opt.MaxDepth+v.mu {
			continue
		}
		z := math.Max(p.Z, v.opt.MinDepth)
		u, vv := k.Fx*p.X/z+k.Cx, k.Fy*p.Y/z+k.Cy
		mu, mv := k.Fx*radius/z+1, k.Fy*radius/z+1
		if u < -mu || u > float64(k.Width)+mu || vv < -mv || vv > float64(k.Height)+mv {
			continue
		}
		dst = append(dst, key)
	}
	slices.SortFunc(dst, compareKeys)
	return dst
}

// integrateBlock updates one block's voxels and returns how many it
// updated.
func (v *Volume) integrateBlock(key BlockKey, b *Block, im *DepthImage, worldToCam mesh.Pose) int {
	k := im.Intr
	vs := v.opt.VoxelSize
	mu := v.mu
	invMu := float32(1 / mu)
	maxW := v.opt.MaxWeight
	minD, maxD := v.opt.MinDepth, v.opt.MaxDepth
	origin := r3.Vec{X: float64(key.X) * BlockSide * vs, Y: float64(key.Y) * BlockSide * vs, Z: float64(key.Z) * BlockSide * vs}
	base := worldToCam.Apply(origin)
	ex := r3.Scale(vs, worldToCam.R.Col(0))
	ey := r3.Scale(vs, worldToCam.R.Col(1))
	ez := r3.Scale(vs, worldToCam.R.Col(2))
	w, h := k.Width, k.Height
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
				u := int(math.Floor(k.Fx*xn + k.Cx + 0.5))
				vv := int(math.Floor(k.Fy*yn + k.Cy + 0.5))
				if u < 0 || vv < 0 || u >= w || vv >= h {
					continue
				}
				pix := vv*w + u
				d := float64(im.Depth[pix])
				if !(d >= minD && d <= maxD) {
					continue
				}
				// Signed distance along the line of sight: the depth
				// difference times the ray's length per unit depth.
				sdf := (d - p.Z) * math.Sqrt(1+xn*xn+yn*yn)
				if sdf < -mu {
					continue
				}
				if im.Behind != nil && sdf < -float64(im.Behind[pix]) {
					continue
				}
				wt := float32(1)
				if im.Weight != nil {
					wt = im.Weight[pix]
					if !(wt > 0) {
						continue
					}
				}
				tsdf := min(float32(sdf)*invMu, 1)
				W := b.W[idx]
				nw := W + wt
				b.D[idx] = (W*b.D[idx] + wt*tsdf) / nw
				if im.Color != nil {
					c := im.Color[3*pix : 3*pix+3]
					cc := &b.C[idx]
					cc[0] = (W*cc[0] + wt*float32(c[0])) / nw
					cc[1] = (W*cc[1] + wt*float32(c[1])) / nw
					cc[2] = (W*cc[2] + wt*float32(c[2])) / nw
				}
				b.W[idx] = min(nw, maxW)
				updates++
			}
		}
	}
	return updates
}
