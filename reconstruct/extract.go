package reconstruct

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Extract returns the zero level set of the volume as a coloured mesh
// with normals from the field's gradient, by marching cubes over the
// blocks (mesh.MarchBlocks: vertices on block borders are shared, so the
// surface has no cracks between blocks). Voxels whose weight is below
// minWeight count as unobserved: cells touching them are not extracted,
// which leaves the surface open where the sweep never looked rather than
// inventing it. Distances are handed over in metres (D·μ).
func (v *Volume) Extract(minWeight float32) (*mesh.Mesh, error) {
	keys := v.Keys()
	bv := &mesh.BlockVolume{Origin: r3.Vec{}, Spacing: v.opt.VoxelSize, Blocks: make([]mesh.Block, 0, len(keys))}
	values := make([]float32, len(keys)*blockVoxels)
	colors := make([]mesh.RGB, len(keys)*blockVoxels)
	mu := float32(v.mu)
	nan := float32(math.NaN())
	observed := 0
	for n, k := range keys {
		b := v.lookup(k)
		vals := values[n*blockVoxels : (n+1)*blockVoxels]
		cols := colors[n*blockVoxels : (n+1)*blockVoxels]
		for i := range vals {
			if b.W[i] < minWeight || b.W[i] == 0 {
				vals[i] = nan
				continue
			}
			observed++
			vals[i] = b.D[i] * mu
			c := b.C[i]
			cols[i] = mesh.RGB{R: clampByte(c[0]), G: clampByte(c[1]), B: clampByte(c[2])}
		}
		bv.Blocks = append(bv.Blocks, mesh.Block{Key: mesh.BlockKey{X: k.X, Y: k.Y, Z: k.Z}, Values: vals, Colors: cols})
	}
	if observed == 0 {
		return nil, fmt.Errorf("reconstruct: the volume has no voxel observed with weight ≥ %g", minWeight)
	}
	m, err := mesh.MarchBlocks(bv, 0, mesh.IsoOptions{Workers: v.opt.Workers})
	if err != nil {
		return nil, fmt.Errorf("reconstruct: extracting the surface: %w", err)
	}
	return m, nil
}

func clampByte(v float32) uint8 {
	switch {
	case v <= 0:
		return 0
	case v >= 255:
		return 255
	default:
		return uint8(v + 0.5)
	}
}
