package reconstruct

import (
	"bytes"
	"compress/zlib"
	"encoding/binary"
	"hash/crc32"
	"image"
	"image/png"
	"math/rand/v2"
	"testing"
)

// writeChunk appends a PNG chunk with its length and CRC (ISO/IEC
// 15948:2004, 5.3).
func writeChunk(out []byte, typ string, body []byte) []byte {
	out = binary.BigEndian.AppendUint32(out, uint32(len(body)))
	start := len(out)
	out = append(out, typ...)
	out = append(out, body...)
	return binary.BigEndian.AppendUint32(out, crc32.ChecksumIEEE(out[start:]))
}

// filterRow applies filter type ft to raw row cur given the raw row
// above (ISO/IEC 15948:2004, 9.2), the encoder's side of unfilter.
func filterRow(ft byte, cur, prev []byte, bpp int) []byte {
	out := make([]byte, len(cur))
	for i := range cur {
		var a, b, c int
		if i >= bpp {
			a, c = int(cur[i-bpp]), int(prev[i-bpp])
		}
		b = int(prev[i])
		var pred int
		switch ft {
		case 1:
			pred = a
		case 2:
			pred = b
		case 3:
			pred = (a + b) / 2
		case 4:
			p := a + b - c
			pa, pb, pc := abs(p-a), abs(p-b), abs(p-c)
			switch {
			case pa <= pb && pa <= pc:
				pred = a
			case pb <= pc:
				pred = b
			default:
				pred = c
			}
		}
		out[i] = cur[i] - byte(pred)
	}
	return out
}

func abs(x int) int { return max(x, -x) }

// handPNG writes raw rows (bpp bytes a pixel) as a PNG with the given
// bit depth and colour type, row y filtered with filter(y), the zlib
// stream split into IDAT chunks of at most split bytes.
func handPNG(w, h, bpp int, bitDepth, colourType byte, raw []byte, filter func(y int) byte, split int) []byte {
	var z bytes.Buffer
	zw := zlib.NewWriter(&z)
	prev := make([]byte, w*bpp)
	for y := 0; y < h; y++ {
		cur := raw[y*w*bpp : (y+1)*w*bpp]
		ft := filter(y)
		zw.Write([]byte{ft})
		zw.Write(filterRow(ft, cur, prev, bpp))
		prev = cur
	}
	zw.Close()
	out := []byte(pngSignature)
	ihdr := binary.BigEndian.AppendUint32(nil, uint32(w))
	ihdr = binary.BigEndian.AppendUint32(ihdr, uint32(h))
	ihdr = append(ihdr, bitDepth, colourType, 0, 0, 0)
	out = writeChunk(out, "IHDR", ihdr)
	stream := z.Bytes()
	for len(stream) > 0 {
		n := min(split, len(stream))
		out = writeChunk(out, "IDAT", stream[:n])
		stream = stream[n:]
	}
	return writeChunk(out, "IEND", nil)
}

// stdlibDecode decodes data with image/png (Go's standard library) into
// what a Frame holds, as readFrame did before decodeSweepPNG.
func stdlibDecode(t *testing.T, data []byte, depth bool, unit float64) ([]float32, *image.NRGBA, error) {
	t.Helper()
	im, err := png.Decode(bytes.NewReader(data))
	if err != nil {
		return nil, nil, err
	}
	if depth {
		g, ok := im.(*image.Gray16)
		if !ok {
			t.Fatalf("image/png decoded a %T for depth", im)
		}
		return depthFromGray16(g, unit), nil, nil
	}
	return nil, toNRGBA(im), nil
}

// sameDecode fails unless decodeSweepPNG accepts data and gives what
// image/png gives.
func sameDecode(t *testing.T, name string, data []byte, depth bool, w, h int) {
	t.Helper()
	const unit = 0.0001
	d, c, ok := decodeSweepPNG(data, depth, unit, w, h)
	if !ok {
		t.Fatalf("%s: refused", name)
	}
	wd, wc, err := stdlibDecode(t, data, depth, unit)
	if err != nil {
		t.Fatalf("%s: image/png: %v", name, err)
	}
	if depth {
		for i := range wd {
			if d[i] != wd[i] {
				t.Fatalf("%s: depth %d is %v, image/png %v", name, i, d[i], wd[i])
			}
		}
		return
	}
	if !bytes.Equal(c.Pix, wc.Pix) || c.Rect != wc.Rect {
		t.Fatalf("%s: colour differs from image/png's", name)
	}
}

// TestDecodeSweepPNG checks the fast decoder against image/png (Go's
// standard library) on hand-written files that use each of the five
// row filters (and all of them in turn), one IDAT chunk or many, for
// 16-bit grey, 8-bit RGB and 8-bit RGBA; on files image/png's encoder
// wrote; and that it refuses what it must leave to image/png: other
// layouts, a bad CRC, a truncated stream, extra pixel data, a size
// other than the caller's.
func TestDecodeSweepPNG(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const w, h = 37, 23
	for _, tc := range []struct {
		name          string
		bpp           int
		bitDepth, typ byte
		depth         bool
	}{{"grey16", 2, 16, 0, true}, {"rgb8", 3, 8, 2, false}, {"rgba8", 4, 8, 6, false}} {
		raw := make([]byte, w*h*tc.bpp)
		for i := range raw {
			raw[i] = byte(i*7/tc.bpp) + byte(rng.IntN(9)) // gradients and noise
		}
		for ft := byte(0); ft <= 5; ft++ {
			filter := func(int) byte { return ft }
			if ft == 5 {
				filter = func(y int) byte { return byte(y % 5) }
			}
			for _, split := range []int{1 << 20, 100} {
				sameDecode(t, tc.name, handPNG(w, h, tc.bpp, tc.bitDepth, tc.typ, raw, filter, split), tc.depth, w, h)
			}
		}
		good := handPNG(w, h, tc.bpp, tc.bitDepth, tc.typ, raw, func(y int) byte { return byte(y % 5) }, 100)
		if _, _, ok := decodeSweepPNG(good, tc.depth, 0.001, w+1, h); ok {
			t.Errorf("%s: accepted for a different width", tc.name)
		}
		if _, _, ok := decodeSweepPNG(good, !tc.depth, 0.001, w, h); ok {
			t.Errorf("%s: accepted as the other kind of image", tc.name)
		}
		bad := bytes.Clone(good)
		bad[len(pngSignature)+20]++ // in IHDR's CRC
		if _, _, ok := decodeSweepPNG(bad, tc.depth, 0.001, w, h); ok {
			t.Errorf("%s: accepted with a bad CRC", tc.name)
		}
		for _, n := range []int{len(good) - 12, len(good) / 2, 40} {
			if _, _, ok := decodeSweepPNG(good[:n], tc.depth, 0.001, w, h); ok {
				t.Errorf("%s: accepted cut to %d bytes", tc.name, n)
			}
		}
		extra := handPNG(w, h+1, tc.bpp, tc.bitDepth, tc.typ, append(bytes.Clone(raw), raw[:w*tc.bpp]...), func(int) byte { return 0 }, 1<<20)
		binary.BigEndian.PutUint32(extra[len(pngSignature)+12:], h) // IHDR says one row less
		binary.BigEndian.PutUint32(extra[len(pngSignature)+29:], crc32.ChecksumIEEE(extra[len(pngSignature)+4:len(pngSignature)+29]))
		if _, err := png.Decode(bytes.NewReader(extra)); err == nil {
			t.Fatalf("%s: image/png accepted extra pixel data: the case is wrong", tc.name)
		}
		if _, _, ok := decodeSweepPNG(extra, tc.depth, 0.001, w, h); ok {
			t.Errorf("%s: accepted extra pixel data", tc.name)
		}
	}
	// Files from image/png's encoder, which picks row filters itself.
	g := image.NewGray16(image.Rect(0, 0, 64, 48))
	c := image.NewNRGBA(image.Rect(0, 0, 64, 48))
	for i := range g.Pix {
		g.Pix[i] = byte(i/3) ^ byte(rng.IntN(4))
	}
	for i := range c.Pix {
		c.Pix[i] = byte(i / 5)
		if i%4 == 3 {
			c.Pix[i] = 0xff // opaque: the encoder writes RGB
		}
	}
	for _, im := range []image.Image{g, c} {
		var b bytes.Buffer
		if err := png.Encode(&b, im); err != nil {
			t.Fatal(err)
		}
		_, depth := im.(*image.Gray16)
		sameDecode(t, "image/png's encoder", b.Bytes(), depth, 64, 48)
	}
	// Paletted and 8-bit grey are left to image/png.
	gray := image.NewGray(image.Rect(0, 0, 8, 8))
	var b bytes.Buffer
	if err := png.Encode(&b, gray); err != nil {
		t.Fatal(err)
	}
	if _, _, ok := decodeSweepPNG(b.Bytes(), false, 0.001, 8, 8); ok {
		t.Error("accepted 8-bit grey")
	}
}

// FuzzDecodeSweepPNG checks decodeSweepPNG against image/png (Go's
// standard library): whatever it accepts, image/png decodes to the same
// values, and it never panics. Seeds: testdata/fuzz/FuzzDecodeSweepPNG
// (small depth and colour files with each row filter, one written by
// image/png's encoder, a truncated one).
func FuzzDecodeSweepPNG(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte, depth bool) {
		cfg, err := png.DecodeConfig(bytes.NewReader(data))
		w, h := 8, 8
		if err == nil {
			if cfg.Width*cfg.Height > 1<<16 {
				return // keep each input quick
			}
			w, h = cfg.Width, cfg.Height
		}
		d, c, ok := decodeSweepPNG(data, depth, 0.001, w, h)
		if !ok {
			return
		}
		if err != nil {
			t.Fatalf("accepted a file whose header image/png refuses: %v", err)
		}
		wd, wc, err := stdlibDecode(t, data, depth, 0.001)
		if err != nil {
			t.Fatalf("accepted a file image/png refuses: %v", err)
		}
		if depth {
			for i := range wd {
				if d[i] != wd[i] {
					t.Fatalf("depth %d is %v, image/png %v", i, d[i], wd[i])
				}
			}
			return
		}
		if !bytes.Equal(c.Pix, wc.Pix) {
			t.Fatal("colour differs from image/png's")
		}
	})
}
