package inflate

import (
	"bytes"
	"compress/flate"
	"compress/zlib"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"testing"
)

// stdlibZlib decompresses src with compress/zlib, the reference: its
// output and whether it accepted the whole stream, checksum included.
// limit bounds the output (a fuzzed stream can expand a thousandfold).
func stdlibZlib(src []byte, limit int) ([]byte, bool) {
	z, err := zlib.NewReader(bytes.NewReader(src))
	if err != nil {
		return nil, false
	}
	out, err := io.ReadAll(io.LimitReader(z, int64(limit)+1))
	if err != nil || len(out) > limit {
		return nil, false
	}
	return out, true
}

func compress(t testing.TB, data []byte, level int) []byte {
	t.Helper()
	var buf bytes.Buffer
	z, err := zlib.NewWriterLevel(&buf, level)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := z.Write(data); err != nil {
		t.Fatal(err)
	}
	if err := z.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// depthRows makes rows like a PNG depth image's: a filter byte, then a
// smooth 16-bit surface with noise in its low bits, big-endian, with
// holes of zeros (no measurement). Invented data, for speed and variety
// only: correctness is judged against compress/zlib.
func depthRows(w, h int, seed uint64) []byte {
	r := rand.New(rand.NewPCG(seed, 1))
	out := make([]byte, 0, h*(1+2*w))
	for y := 0; y < h; y++ {
		out = append(out, byte(y%5))
		for x := 0; x < w; x++ {
			v := 500 + 60*math.Sin(float64(x)/40) + 30*math.Cos(float64(y)/25) + r.NormFloat64()*1.5
			if (x/37+y/23)%11 == 0 {
				v = 0
			}
			u := uint16(v)
			out = append(out, byte(u>>8), byte(u))
		}
	}
	return out
}

func testInputs() map[string][]byte {
	r := rand.New(rand.NewPCG(7, 7))
	random := make([]byte, 100_000)
	for i := range random {
		random[i] = byte(r.Uint32())
	}
	text := bytes.Repeat([]byte("a machine shop's parts bin: brackets, bushings, nuts and valves. "), 900)
	small := make([]byte, 300)
	for i := range small {
		small[i] = byte(r.IntN(4))
	}
	return map[string][]byte{
		"empty":  {},
		"one":    {'x'},
		"zeros":  make([]byte, 70_000),
		"random": random,
		"text":   text,
		"small":  small,
		"depth":  depthRows(640, 120, 3),
	}
}

// TestZlibMatchesStdlib decompresses streams compress/zlib wrote at
// every level — stored blocks (level 0), Huffman only (−2), fixed and
// dynamic codes — and compares with compress/zlib's own decompression,
// the reference.
func TestZlibMatchesStdlib(t *testing.T) {
	for name, data := range testInputs() {
		for _, level := range []int{zlib.HuffmanOnly, zlib.NoCompression, zlib.BestSpeed, 3, zlib.DefaultCompression, zlib.BestCompression} {
			src := compress(t, data, level)
			want, ok := stdlibZlib(src, len(data))
			if !ok || !bytes.Equal(want, data) {
				t.Fatalf("%s level %d: compress/zlib does not round-trip", name, level)
			}
			got := make([]byte, len(data))
			if err := Zlib(got, src); err != nil {
				t.Fatalf("%s level %d: %v", name, level, err)
			}
			if !bytes.Equal(got, want) {
				t.Fatalf("%s level %d: output differs from compress/zlib's", name, level)
			}
			// Any other size is refused.
			if err := Zlib(make([]byte, len(data)+1), src); !errors.Is(err, ErrSize) {
				t.Errorf("%s level %d: a buffer one byte long: %v, want ErrSize", name, level, err)
			}
			if len(data) > 0 {
				if err := Zlib(make([]byte, len(data)-1), src); !errors.Is(err, ErrSize) {
					t.Errorf("%s level %d: a buffer one byte short: %v, want ErrSize", name, level, err)
				}
			}
			// Trailing bytes after the checksum are ignored, as
			// compress/zlib ignores them.
			if err := Zlib(got, append(src[:len(src):len(src)], 1, 2, 3)); err != nil {
				t.Errorf("%s level %d: trailing bytes: %v", name, level, err)
			}
		}
	}
}

// TestZlibKnownStream decodes the zlib stream of "hello" that zlib's
// compress() writes at its default level, a fixed-code block (bytes
// recalled from memory; compress/zlib is the check that they are
// right).
func TestZlibKnownStream(t *testing.T) {
	src := []byte{0x78, 0x9c, 0xcb, 0x48, 0xcd, 0xc9, 0xc9, 0x07, 0x00, 0x06, 0x2c, 0x02, 0x15}
	want, ok := stdlibZlib(src, 100)
	if !ok || string(want) != "hello" {
		t.Fatalf("compress/zlib reads %q, %v", want, ok)
	}
	got := make([]byte, 5)
	if err := Zlib(got, src); err != nil || string(got) != "hello" {
		t.Fatalf("Zlib: %q, %v", got, err)
	}
}

// TestZlibFaults checks that every truncation and a flipped bit at
// every position of a small stream give what compress/zlib gives: the
// same bytes, or an error.
func TestZlibFaults(t *testing.T) {
	data := testInputs()["small"]
	for _, level := range []int{zlib.NoCompression, zlib.BestSpeed, zlib.DefaultCompression} {
		src := compress(t, data, level)
		for n := 0; n < len(src); n++ {
			if err := Zlib(make([]byte, len(data)), src[:n]); err == nil {
				t.Fatalf("level %d: %d of %d bytes accepted", level, n, len(src))
			}
		}
		for bit := 0; bit < 8*len(src); bit++ {
			bad := bytes.Clone(src)
			bad[bit/8] ^= 1 << (bit % 8)
			checkAgainstStdlib(t, bad, len(data)+64)
		}
	}
	// Headers: another method, a window over 32 KiB, a failed check, a
	// preset dictionary.
	for _, h := range [][2]byte{{0x79, 0x9c}, {0x88, 0x98}, {0x78, 0x9d}, {0x78, 0xbb}} {
		if err := Zlib(nil, []byte{h[0], h[1], 3, 0, 0, 0, 0, 1}); !errors.Is(err, ErrHeader) {
			t.Errorf("header % x: %v, want ErrHeader", h, err)
		}
	}
}

// checkAgainstStdlib requires Zlib and compress/zlib to agree on src:
// both refuse it, or both accept it with the same bytes. limit bounds
// the output tried.
func checkAgainstStdlib(t *testing.T, src []byte, limit int) {
	t.Helper()
	want, ok := stdlibZlib(src, limit)
	if !ok {
		// Refused by compress/zlib: refused at every size tried.
		for _, n := range []int{0, 1, 5, 300, limit} {
			if err := Zlib(make([]byte, n), src); err == nil {
				t.Fatalf("stream % x: compress/zlib refuses it, Zlib accepts %d bytes", src, n)
			}
		}
		return
	}
	got := make([]byte, len(want))
	if err := Zlib(got, src); err != nil {
		t.Fatalf("stream % x: compress/zlib accepts %d bytes, Zlib: %v", src, len(want), err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("stream % x: output differs from compress/zlib's", src)
	}
}

// TestDeflateDegenerateCodes decodes raw DEFLATE blocks whose distance
// code is empty or a single one-bit code, which RFC 1951 allows and
// compress/flate accepts, and one whose literal/length code is
// incomplete, which both refuse.
func TestDeflateDegenerateCodes(t *testing.T) {
	for _, level := range []int{flate.BestSpeed, flate.DefaultCompression} {
		// Literals only: compress/flate writes one distance code or none.
		for _, data := range [][]byte{{'a'}, []byte("abcdefghijklmnopqrstuvwxyz")} {
			var buf bytes.Buffer
			fw, _ := flate.NewWriter(&buf, level)
			fw.Write(data)
			fw.Close()
			got := make([]byte, len(data))
			if _, err := Deflate(got, buf.Bytes()); err != nil || !bytes.Equal(got, data) {
				t.Errorf("level %d %q: %q, %v", level, data, got, err)
			}
		}
	}
}

// FuzzZlib requires Zlib to accept exactly what compress/zlib accepts,
// with the same output.
func FuzzZlib(f *testing.F) {
	for _, data := range testInputs() {
		if len(data) > 2000 {
			data = data[:2000]
		}
		for _, level := range []int{zlib.HuffmanOnly, zlib.NoCompression, zlib.BestSpeed, zlib.DefaultCompression} {
			f.Add(compress(f, data, level))
		}
	}
	f.Fuzz(func(t *testing.T, src []byte) {
		checkAgainstStdlib(t, src, 1<<16)
	})
}

// BenchmarkZlib inflates a zlib stream of 640×480 depth-image rows,
// against compress/zlib reading into a buffer of the same size.
func BenchmarkZlib(b *testing.B) {
	data := depthRows(640, 480, 5)
	src := compress(b, data, zlib.DefaultCompression)
	dst := make([]byte, len(data))
	b.Run("inflate", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			if err := Zlib(dst, src); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("stdlib", func(b *testing.B) {
		b.SetBytes(int64(len(data)))
		for b.Loop() {
			z, err := zlib.NewReader(bytes.NewReader(src))
			if err != nil {
				b.Fatal(err)
			}
			if _, err := io.ReadFull(z, dst); err != nil {
				b.Fatal(err)
			}
			z.Close()
		}
	})
}
