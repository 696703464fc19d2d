package mesh_test

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// A unit sphere as a signed distance field (negative inside), sampled
// every 0.1 and extracted at level 0. The enclosed volume comes close to
// 4π/3 ≈ 4.189 and the area 4π ≈ 12.566 from below; the mesh is
// closed, with Euler characteristic 2.
func ExampleMarchingCubes() {
	sphere := func(p r3.Vec) float64 { return math.Sqrt(p.X*p.X+p.Y*p.Y+p.Z*p.Z) - 1 }
	g, err := mesh.SampleGrid(sphere, nil, r3.Vec{X: -1.23, Y: -1.23, Z: -1.23}, r3.Vec{X: 1.2, Y: 1.2, Z: 1.2}, 0.1)
	if err != nil {
		fmt.Println(err)
		return
	}
	m, err := mesh.MarchingCubes(g, 0)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%d vertices, %d faces, watertight %v, Euler characteristic %d\n",
		len(m.Vertices), len(m.Faces), m.IsWatertight(), m.EulerCharacteristic())
	fmt.Printf("volume %.3f, area %.3f\n", m.SignedVolume(), m.Area())
	// Output:
	// 1896 vertices, 3788 faces, watertight true, Euler characteristic 2
	// volume 4.164, area 12.527
}

// A sparse field in 8³ blocks, as a block-hashed TSDF holds it: here a
// sphere of radius 5 voxels kept only within ±2 voxels of its surface
// (NaN elsewhere, like unobserved voxels), in whichever blocks that
// band touches. Vertices on block borders are shared, so the mesh is
// closed.
func ExampleMarchBlocks() {
	const band = 2
	blocks := map[mesh.BlockKey]*mesh.Block{}
	for k := -8; k < 8; k++ {
		for j := -8; j < 8; j++ {
			for i := -8; i < 8; i++ {
				d := math.Sqrt(float64(i*i+j*j+k*k)+0.3) - 5
				if math.Abs(d) > band {
					continue
				}
				key := mesh.BlockKey{X: int32(floorDiv(i, 8)), Y: int32(floorDiv(j, 8)), Z: int32(floorDiv(k, 8))}
				b := blocks[key]
				if b == nil {
					b = &mesh.Block{Key: key, Values: make([]float32, mesh.BlockValues)}
					for n := range b.Values {
						b.Values[n] = float32(math.NaN())
					}
					blocks[key] = b
				}
				x, y, z := i-8*int(key.X), j-8*int(key.Y), k-8*int(key.Z)
				b.Values[x+8*(y+8*z)] = float32(d)
			}
		}
	}
	v := &mesh.BlockVolume{Spacing: 0.001} // 1 mm voxels
	for _, b := range blocks {
		v.Blocks = append(v.Blocks, *b)
	}
	m, err := mesh.MarchBlocks(v, 0, mesh.DefaultIsoOptions())
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%d blocks, %d faces, watertight %v, consistently oriented %v\n",
		len(v.Blocks), len(m.Faces), m.IsWatertight(), m.IsConsistentlyOriented())
	// Output:
	// 8 blocks, 824 faces, watertight true, consistently oriented true
}

func floorDiv(a, b int) int {
	q := a / b
	if a%b != 0 && a < 0 {
		q--
	}
	return q
}
