package inflate

import (
	"bytes"
	"compress/zlib"
	"errors"
	"hash/adler32"
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

// bitWriter packs bits as DEFLATE does (RFC 1951, 3.1.1): values from
// their least significant bit, Huffman codes from their most.
type bitWriter struct {
	out   []byte
	nbits uint
}

func (w *bitWriter) bits(v uint, n uint) {
	for i := uint(0); i < n; i++ {
		if w.nbits%8 == 0 {
			w.out = append(w.out, 0)
		}
		w.out[len(w.out)-1] |= byte((v>>i)&1) << (w.nbits % 8)
		w.nbits++
	}
}

func (w *bitWriter) code(c, n uint) {
	for i := n; i > 0; i-- {
		w.bits(c>>(i-1)&1, 1)
	}
}

// canonical assigns the canonical codes of RFC 1951, 3.2.2, to lengths.
func canonical(lengths []uint8) []uint {
	var count, next [16]uint
	for _, l := range lengths {
		count[l]++
	}
	count[0] = 0
	code := uint(0)
	for l := 1; l < 16; l++ {
		code = (code + count[l-1]) << 1
		next[l] = code
	}
	codes := make([]uint, len(lengths))
	for s, l := range lengths {
		if l > 0 {
			codes[s] = next[l]
			next[l]++
		}
	}
	return codes
}

// dynamicZlib writes a zlib stream of one final dynamic block (RFC 1951,
// 3.2.7) with the literal/length code lengths lit (257 of them or more)
// and distance code lengths dist, holding the literals of data then the
// end-of-block code; each code length is sent as a code length symbol
// of its own, with a code length code of 4 bits a symbol for 0–15.
func dynamicZlib(lit, dist []uint8, data []byte) []byte {
	w := &bitWriter{out: []byte{0x78, 0x01}, nbits: 16}
	w.bits(1, 1) // BFINAL
	w.bits(2, 2) // dynamic
	w.bits(uint(len(lit)-257), 5)
	w.bits(uint(len(dist)-1), 5)
	w.bits(19-4, 4)
	order := []int{16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15}
	for _, sym := range order {
		if sym < 16 {
			w.bits(4, 3)
		} else {
			w.bits(0, 3)
		}
	}
	for _, l := range append(append([]uint8{}, lit...), dist...) {
		w.code(uint(l), 4) // 16 codes of 4 bits: symbol l's code is l
	}
	codes := canonical(lit)
	for _, b := range data {
		w.code(codes[b], uint(lit[b]))
	}
	w.code(codes[256], uint(lit[256]))
	sum := adler32.Checksum(data)
	return append(w.out, byte(sum>>24), byte(sum>>16), byte(sum>>8), byte(sum))
}

// TestZlibHandBuiltCodes decodes dynamic blocks built bit by bit
// against RFC 1951: a distance code that is empty or a single one-bit
// code (allowed when the block has no matches, 3.2.7, and accepted by
// zlib and compress/flate) is read; an incomplete or over-subscribed
// literal/length code is refused, as compress/zlib refuses it.
func TestZlibHandBuiltCodes(t *testing.T) {
	lit := func(set map[int]uint8) []uint8 {
		l := make([]uint8, 257)
		for s, n := range set {
			l[s] = n
		}
		return l
	}
	cases := []struct {
		name string
		lit  []uint8
		dist []uint8
		data string
		ok   bool
	}{
		{"empty distance code", lit(map[int]uint8{'a': 1, 256: 1}), []uint8{0}, "aaa", true},
		{"single one-bit distance code", lit(map[int]uint8{'a': 1, 256: 1}), []uint8{1}, "aaa", true},
		{"two-bit literal code", lit(map[int]uint8{'a': 2, 'b': 2, 'c': 2, 256: 2}), []uint8{0}, "abacab", true},
		{"incomplete literal code", lit(map[int]uint8{'a': 1, 256: 2}), []uint8{0}, "aaa", false},
		{"over-subscribed literal code", lit(map[int]uint8{'a': 1, 'b': 1, 256: 1}), []uint8{0}, "aaa", false},
	}
	for _, c := range cases {
		data := []byte(c.data)
		src := dynamicZlib(c.lit, c.dist, data)
		want, ok := stdlibZlib(src, 100)
		if ok != c.ok || (ok && !bytes.Equal(want, data)) {
			t.Fatalf("%s: compress/zlib reads %q, %v; the stream is not what the test means", c.name, want, ok)
		}
		checkAgainstStdlib(t, src, 100)
		got := make([]byte, len(data))
		if err := Zlib(got, src); (err == nil) != c.ok {
			t.Errorf("%s: %v", c.name, err)
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
