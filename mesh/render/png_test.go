package render

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func TestDepthPNGRoundTrip(t *testing.T) {
	const w, h, unit = 7, 5, 0.001
	rng := rand.New(rand.NewPCG(1, 1))
	depth := make([]float32, w*h)
	for i := range depth {
		depth[i] = float32(0.3 + 3*rng.Float64())
	}
	depth[0] = 0                      // no measurement: stays 0, not counted
	depth[1] = 70                     // 70000 mm > 65535
	depth[2] = float32(math.NaN())    // not finite
	depth[3] = -1                     // negative
	depth[4] = 0.0004                 // rounds to 0 mm
	depth[5] = float32(65535 * 0.001) // the largest storable value
	depth[6] = float32(math.Inf(1))   // not finite
	var buf bytes.Buffer
	dropped, err := WriteDepthPNG(&buf, depth, w, h, unit)
	if err != nil {
		t.Fatal(err)
	}
	if dropped != 5 {
		t.Errorf("dropped %d, want 5", dropped)
	}
	// The file is a 16-bit grey PNG by the standard library's decoder.
	if cfg, err := png.DecodeConfig(bytes.NewReader(buf.Bytes())); err != nil || cfg.ColorModel != color.Gray16Model {
		t.Fatalf("written file: %v, %v", cfg.ColorModel, err)
	}
	got, gw, gh, err := ReadDepthPNG(bytes.NewReader(buf.Bytes()), unit)
	if err != nil {
		t.Fatal(err)
	}
	if gw != w || gh != h {
		t.Fatalf("size %d×%d, want %d×%d", gw, gh, w, h)
	}
	for i, z := range depth {
		want := math.Round(float64(z)/unit) * unit
		if i >= 1 && i <= 4 || i == 6 {
			want = 0
		}
		// Quantisation to 1 mm: the read value is the nearest multiple of
		// the unit, rounded to float32.
		if got[i] != float32(want) {
			t.Errorf("pixel %d: wrote %v, read %v, want %v", i, z, got[i], want)
		}
	}
}

// pngBytes encodes img with the standard library.
func pngBytes(t testing.TB, img image.Image) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := png.Encode(&buf, img); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// pngHeaderOnly returns a PNG signature and IHDR chunk (with a correct
// CRC, as the PNG specification, ISO/IEC 15948, lays them out) claiming
// a w×h image of the given bit depth and colour type, and no data.
func pngHeaderOnly(w, h uint32, depth, ctype byte) []byte {
	var b bytes.Buffer
	b.WriteString("\x89PNG\r\n\x1a\n")
	body := make([]byte, 17)
	copy(body, "IHDR")
	binary.BigEndian.PutUint32(body[4:], w)
	binary.BigEndian.PutUint32(body[8:], h)
	body[12], body[13] = depth, ctype
	binary.Write(&b, binary.BigEndian, uint32(13))
	b.Write(body)
	binary.Write(&b, binary.BigEndian, crc32.ChecksumIEEE(body))
	return b.Bytes()
}

func TestReadDepthPNGErrors(t *testing.T) {
	gray8 := pngBytes(t, image.NewGray(image.Rect(0, 0, 4, 4)))
	rgb := pngBytes(t, image.NewRGBA(image.Rect(0, 0, 4, 4)))
	good := pngBytes(t, image.NewGray16(image.Rect(0, 0, 4, 4)))
	for _, tc := range []struct {
		name        string
		data        []byte
		want        string
		unsupported bool
	}{
		{"8-bit grey", gray8, "8-bit", true},
		{"colour", rgb, "colour image", true},
		{"empty", nil, "header", false},
		{"not a PNG", []byte("P5 4 4 65535\n"), "header", false},
		{"truncated", good[:len(good)-20], "depth PNG", false},
		{"too wide", pngHeaderOnly(20000, 10, 16, 0), "out of range", false},
		{"huge and short", pngHeaderOnly(16000, 16000, 16, 0), "cannot hold", false},
	} {
		_, _, _, err := ReadDepthPNG(bytes.NewReader(tc.data), 0.001)
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "render: depth PNG") {
			t.Errorf("%s: error %v, want one containing %q", tc.name, err, tc.want)
			continue
		}
		if errors.Is(err, ErrUnsupportedImage) != tc.unsupported {
			t.Errorf("%s: errors.Is(ErrUnsupportedImage) = %v", tc.name, !tc.unsupported)
		}
	}
	if _, _, _, err := ReadDepthPNG(bytes.NewReader(good), 0); err == nil {
		t.Error("unit 0 accepted")
	}
	if _, err := WriteDepthPNG(io.Discard, make([]float32, 5), 2, 2, 0.001); err == nil {
		t.Error("wrong length accepted")
	}
	if _, err := WriteDepthPNG(io.Discard, nil, 0, 0, 0.001); err == nil {
		t.Error("empty image accepted")
	}
}

func TestColorPNGRoundTrip(t *testing.T) {
	img := image.NewNRGBA(image.Rect(0, 0, 5, 3))
	rng := rand.New(rand.NewPCG(2, 2))
	for i := range img.Pix {
		img.Pix[i] = uint8(rng.IntN(256))
	}
	var buf bytes.Buffer
	if err := WriteColorPNG(&buf, img); err != nil {
		t.Fatal(err)
	}
	got, err := ReadColorPNG(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.Pix, img.Pix) || got.Rect != img.Rect {
		t.Error("colour round trip changed the image")
	}
	// Opaque images are written as RGB and come back opaque.
	for i := 3; i < len(img.Pix); i += 4 {
		img.Pix[i] = 255
	}
	buf.Reset()
	if err := WriteColorPNG(&buf, img); err != nil {
		t.Fatal(err)
	}
	got, err = ReadColorPNG(bytes.NewReader(buf.Bytes()))
	if err != nil || !bytes.Equal(got.Pix, img.Pix) {
		t.Errorf("opaque round trip: %v", err)
	}
	// Grey and paletted images are accepted and converted.
	pal := image.NewPaletted(image.Rect(0, 0, 2, 2), color.Palette{color.NRGBA{10, 20, 30, 255}, color.NRGBA{1, 2, 3, 255}})
	pal.Pix[3] = 1
	got, err = ReadColorPNG(bytes.NewReader(pngBytes(t, pal)))
	if err != nil {
		t.Fatal(err)
	}
	if c := got.NRGBAAt(1, 1); c != (color.NRGBA{1, 2, 3, 255}) {
		t.Errorf("paletted pixel %v", c)
	}
	if _, err := ReadColorPNG(bytes.NewReader(pngBytes(t, image.NewGray(image.Rect(0, 0, 2, 2))))); err != nil {
		t.Errorf("8-bit grey refused: %v", err)
	}
}

func TestReadColorPNGErrors(t *testing.T) {
	for _, tc := range []struct {
		name string
		data []byte
		want string
	}{
		{"16-bit grey", pngBytes(t, image.NewGray16(image.Rect(0, 0, 2, 2))), "16-bit grey"},
		{"empty", nil, "header"},
		{"too tall", pngHeaderOnly(10, 16385, 8, 2), "out of range"},
		{"huge and short", pngHeaderOnly(16000, 16000, 8, 6), "cannot hold"},
	} {
		_, err := ReadColorPNG(bytes.NewReader(tc.data))
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "render: colour PNG") {
			t.Errorf("%s: error %v, want one containing %q", tc.name, err, tc.want)
		}
	}
}

// FuzzReadDepthPNG feeds arbitrary bytes to ReadDepthPNG (seeds in
// testdata/fuzz/FuzzReadDepthPNG): it must not panic, and whatever it
// accepts must write back and read again unchanged.
func FuzzReadDepthPNG(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		depth, w, h, err := ReadDepthPNG(bytes.NewReader(data), 0.001)
		if err != nil {
			return
		}
		if len(depth) != w*h || w <= 0 || h <= 0 {
			t.Fatalf("%d values for %d×%d", len(depth), w, h)
		}
		var buf bytes.Buffer
		if dropped, err := WriteDepthPNG(&buf, depth, w, h, 0.001); err != nil || dropped != 0 {
			t.Fatalf("write back: dropped %d, %v", dropped, err)
		}
		again, w2, h2, err := ReadDepthPNG(&buf, 0.001)
		if err != nil || w2 != w || h2 != h {
			t.Fatalf("read back: %v", err)
		}
		for i := range depth {
			if again[i] != depth[i] {
				t.Fatalf("pixel %d: %v then %v", i, depth[i], again[i])
			}
		}
	})
}

// FuzzReadColorPNG feeds arbitrary bytes to ReadColorPNG (seeds in
// testdata/fuzz/FuzzReadColorPNG): it must not panic, and whatever it
// accepts must write back and read again unchanged.
func FuzzReadColorPNG(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		img, err := ReadColorPNG(bytes.NewReader(data))
		if err != nil {
			return
		}
		var buf bytes.Buffer
		if err := WriteColorPNG(&buf, img); err != nil {
			t.Fatalf("write back: %v", err)
		}
		again, err := ReadColorPNG(&buf)
		if err != nil {
			t.Fatalf("read back: %v", err)
		}
		if again.Rect != img.Rect || !bytes.Equal(again.Pix, img.Pix) {
			t.Fatal("round trip changed the image")
		}
	})
}

// TestDepthPNGDecodesWithStandardLibrary checks our 16-bit encoder
// against the Go standard library's PNG decoder on an image with smooth
// runs, jumps and holes (so both row filters get chosen), including an
// odd width and the largest value.
func TestDepthPNGDecodesWithStandardLibrary(t *testing.T) {
	const w, h = 97, 61
	rng := rand.New(rand.NewPCG(3, 3))
	depth := make([]float32, w*h)
	want := make([]uint16, w*h)
	v := 1000.0
	for i := range depth {
		switch r := rng.Float64(); {
		case r < 0.05:
			v = 1 + 65534*rng.Float64() // a jump
		case r < 0.1:
			want[i] = 0 // a hole
			continue
		default:
			v = math.Min(65535, math.Max(1, v+rng.NormFloat64()*3))
		}
		want[i] = uint16(math.Round(v))
		depth[i] = float32(float64(want[i]) * 0.001)
	}
	want[5], depth[5] = 65535, 65.535
	var buf bytes.Buffer
	if dropped, err := WriteDepthPNG(&buf, depth, w, h, 0.001); err != nil || dropped != 0 {
		t.Fatalf("dropped %d, %v", dropped, err)
	}
	img, err := png.Decode(&buf)
	if err != nil {
		t.Fatal(err)
	}
	g, ok := img.(*image.Gray16)
	if !ok || g.Rect != image.Rect(0, 0, w, h) {
		t.Fatalf("decoded %T %v", img, img.Bounds())
	}
	for i, wv := range want {
		if got := g.Gray16At(i%w, i/w).Y; got != wv {
			t.Fatalf("pixel %d: decoded %d, wrote %d", i, got, wv)
		}
	}
}
