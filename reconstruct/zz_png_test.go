package reconstruct

import (
	"os"
	"path/filepath"
	"testing"
)

func BenchmarkZZDecode(b *testing.B) {
	d, _ := filepath.Glob("/tmp/scanfold-bench-sweeps/bracket-handheld*")
	var dep, col [][]byte
	for i := 0; i < 8; i++ {
		x, _ := os.ReadFile(filepath.Join(d[0], "depth", "0000"+string(rune('0'+i/10))+string(rune('0'+i%10))+".png"))
		y, _ := os.ReadFile(filepath.Join(d[0], "color", "0000"+string(rune('0'+i/10))+string(rune('0'+i%10))+".png"))
		dep = append(dep, x)
		col = append(col, y)
	}
	b.Run("depth", func(b *testing.B) {
		for i := 0; b.Loop(); i++ {
			if _, _, ok := decodeSweepPNG(dep[i%8], true, 0.001, 640, 480); !ok {
				b.Fatal("no")
			}
		}
	})
	b.Run("colour", func(b *testing.B) {
		for i := 0; b.Loop(); i++ {
			if _, _, ok := decodeSweepPNG(col[i%8], false, 0.001, 640, 480); !ok {
				b.Fatal("no")
			}
		}
	})
}
