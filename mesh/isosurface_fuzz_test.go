package mesh

import (
	"math"
	"testing"
)

// fuzzGrid turns bytes into a small grid: the first three bytes give
// the sides (2…6), the top bit of the first byte asks for a border of
// outside values (so the surface must close), and the following bytes,
// cycled, give the values: 255 is unknown (NaN), b is (b − 128)/16, so
// 128 is exactly the iso level 0.
func fuzzGrid(data []byte) (g *Grid, closed, unknown bool) {
	if len(data) < 3 {
		return nil, false, false
	}
	g = &Grid{Spacing: 0.5, Nx: 2 + int(data[0]&0x7f)%5, Ny: 2 + int(data[1])%5, Nz: 2 + int(data[2])%5}
	closed = data[0]&0x80 != 0
	vals := data[3:]
	g.Values = make([]float32, g.Nx*g.Ny*g.Nz)
	for k := 0; k < g.Nz; k++ {
		for j := 0; j < g.Ny; j++ {
			for i := 0; i < g.Nx; i++ {
				idx := i + g.Nx*(j+g.Ny*k)
				v := float32(1)
				border := i == 0 || j == 0 || k == 0 || i == g.Nx-1 || j == g.Ny-1 || k == g.Nz-1
				if len(vals) > 0 && !(closed && border) {
					b := vals[idx%len(vals)]
					if b == 255 {
						v = float32(math.NaN())
						unknown = true
					} else {
						v = float32(int(b)-128) / 16
					}
				}
				g.Values[idx] = v
			}
		}
	}
	return g, closed, unknown
}

// FuzzMarchingCubes checks, on arbitrary small fields, that extraction
// never fails or panics, that the mesh is a consistently oriented
// manifold (closed when the border is outside and no value is unknown),
// that normals are unit vectors, and that the block path gives the same
// output. Seeds are in testdata/fuzz/FuzzMarchingCubes.
func FuzzMarchingCubes(f *testing.F) {
	f.Add([]byte{0x83, 4, 4, 0, 255, 128, 200, 10, 128, 250})
	f.Fuzz(func(t *testing.T, data []byte) {
		g, closed, unknown := fuzzGrid(data)
		if g == nil {
			return
		}
		m, err := MarchGrid(g, 0, IsoOptions{Workers: 2})
		if err != nil {
			t.Fatal(err)
		}
		_, boundary := isoTopology(t, m, !closed || unknown)
		if closed && !unknown && boundary != 0 {
			t.Fatalf("%d boundary edges in a closed field", boundary)
		}
		for i, n := range m.Normals {
			if math.Abs(math.Sqrt(n.X*n.X+n.Y*n.Y+n.Z*n.Z)-1) > 1e-9 {
				t.Fatalf("normal %d = %v is not a unit vector", i, n)
			}
		}
		b, err := MarchBlocks(splitBlocks(g, [3]int{}), 0, IsoOptions{Workers: 3})
		if err != nil {
			t.Fatal(err)
		}
		if !meshEqual(m, b) {
			t.Fatal("blocks and grid differ")
		}
	})
}
