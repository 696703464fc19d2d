package render

import (
	"bufio"
	"bytes"
	"compress/zlib"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"io"
	"math"

	"github.com/scanfold/scanfold/mesh"
)

// ErrUnsupportedImage is wrapped by errors for well-formed images of a
// kind a reader does not take (an 8-bit or colour depth image, a 16-bit
// grey colour image).
var ErrUnsupportedImage = errors.New("render: unsupported image")

// maxPNGBytes bounds how much of a PNG stream the readers take in:
// enough for the largest image mesh.MaxImageSide allows at 64 bits per
// pixel stored without compression.
const maxPNGBytes = 8*mesh.MaxImageSide*mesh.MaxImageSide + 1<<20

// deflateMaxRatio is the largest expansion of DEFLATE data (RFC 1951):
// a 258-byte match costs at least 2 bits, about 1032:1 (from memory).
// A PNG whose decoded rows would need more compressed bytes than the
// file holds is truncated, and is refused before any pixel buffer is
// allocated.
const deflateMaxRatio = 1032

// WriteDepthPNG writes depth (row-major, width×height, metres) as a
// 16-bit grey PNG with value round(z/unit), 0 meaning no measurement
// (common practice, with unit = 0.001 for millimetres). Depths that
// cannot be stored — negative, not finite, positive but rounding to 0, or
// beyond 65535 units — are written as 0 and counted in dropped.
//
// The encoder is ours (the standard library's boxes every 16-bit pixel):
// the chunk layout, CRC-32 and zlib-wrapped DEFLATE stream of the PNG
// specification (ISO/IEC 15948), one IDAT chunk, and per row the Sub or
// Up filter, whichever has the smaller sum of absolute filtered bytes
// (the heuristic the specification recommends).
func WriteDepthPNG(w io.Writer, depth []float32, width, height int, unit float64) (dropped int, err error) {
	if err := checkSize("depth PNG", width, height); err != nil {
		return 0, err
	}
	if len(depth) != width*height {
		return 0, fmt.Errorf("render: depth PNG: %d depth values for %d×%d pixels", len(depth), width, height)
	}
	if !(unit > 0) || math.IsInf(unit, 0) {
		return 0, fmt.Errorf("render: depth PNG: unit %v, want a positive finite length in metres", unit)
	}
	// Each row: big-endian 16-bit values, as PNG stores samples.
	row := make([]byte, 2*width)
	err = writeGray16PNG(w, width, height, func(y int) []byte {
		for x, z := range depth[y*width : (y+1)*width] {
			var v uint16
			if z != 0 {
				f := math.Round(float64(z) / unit)
				if f >= 1 && f <= math.MaxUint16 { // false for NaN too
					v = uint16(f)
				} else {
					dropped++
				}
			}
			row[2*x], row[2*x+1] = uint8(v>>8), uint8(v)
		}
		return row
	})
	if err != nil {
		return dropped, fmt.Errorf("render: depth PNG: %w", err)
	}
	return dropped, nil
}

// ReadDepthPNG reads a 16-bit grey PNG written by WriteDepthPNG (or any
// 16-bit grey PNG) and returns depth in metres (value·unit, 0 for no
// measurement), row-major, with its width and height. It refuses 8-bit
// and colour images with an error wrapping ErrUnsupportedImage, sizes
// beyond mesh.MaxImageSide, and files too short to hold the pixels their
// header announces, before allocating the image.
func ReadDepthPNG(r io.Reader, unit float64) (depth []float32, width, height int, err error) {
	if !(unit > 0) || math.IsInf(unit, 0) {
		return nil, 0, 0, fmt.Errorf("render: depth PNG: unit %v, want a positive finite length in metres", unit)
	}
	data, cfg, err := readPNGHeader(r, "depth PNG")
	if err != nil {
		return nil, 0, 0, err
	}
	switch cfg.ColorModel {
	case color.Gray16Model:
	case color.GrayModel:
		return nil, 0, 0, fmt.Errorf("render: depth PNG: %w: 8-bit (or fewer bits) grey; depth needs 16-bit grey", ErrUnsupportedImage)
	default:
		return nil, 0, 0, fmt.Errorf("render: depth PNG: %w: colour image; depth needs 16-bit grey", ErrUnsupportedImage)
	}
	if err := checkCompressed("depth PNG", cfg, 16, len(data)); err != nil {
		return nil, 0, 0, err
	}
	img, err := png.Decode(bytes.NewReader(data))
	if err != nil {
		return nil, 0, 0, fmt.Errorf("render: depth PNG: %w", err)
	}
	g, ok := img.(*image.Gray16)
	if !ok || g.Rect.Dx() != cfg.Width || g.Rect.Dy() != cfg.Height {
		return nil, 0, 0, fmt.Errorf("render: depth PNG: decoded as %T, want a %d×%d 16-bit grey image", img, cfg.Width, cfg.Height)
	}
	width, height = cfg.Width, cfg.Height
	depth = make([]float32, width*height)
	for y := 0; y < height; y++ {
		row := g.Pix[y*g.Stride:]
		for x := 0; x < width; x++ {
			v := uint16(row[2*x])<<8 | uint16(row[2*x+1])
			depth[y*width+x] = float32(float64(v) * unit)
		}
	}
	return depth, width, height, nil
}

// WriteColorPNG writes img as an 8-bit PNG (RGB when img is opaque, RGBA
// otherwise).
func WriteColorPNG(w io.Writer, img image.Image) error {
	if img == nil {
		return errors.New("render: colour PNG: nil image")
	}
	b := img.Bounds()
	if err := checkSize("colour PNG", b.Dx(), b.Dy()); err != nil {
		return err
	}
	enc := png.Encoder{CompressionLevel: png.BestSpeed}
	if err := enc.Encode(w, img); err != nil {
		return fmt.Errorf("render: colour PNG: %w", err)
	}
	return nil
}

// ReadColorPNG reads a colour (or 8-bit grey, or paletted) PNG into 8-bit
// non-premultiplied RGBA with its origin at (0, 0); 16-bit colour is
// reduced to 8 bits. It refuses a 16-bit grey PNG, which is a depth
// image, with an error wrapping ErrUnsupportedImage, sizes beyond
// mesh.MaxImageSide, and files too short for the pixels their header
// announces.
func ReadColorPNG(r io.Reader) (*image.NRGBA, error) {
	data, cfg, err := readPNGHeader(r, "colour PNG")
	if err != nil {
		return nil, err
	}
	// The fewest bits per pixel each colour model can come from, for the
	// truncation check.
	bits := 1 // grey of 1–8 bits, paletted
	switch cfg.ColorModel {
	case color.Gray16Model:
		return nil, fmt.Errorf("render: colour PNG: %w: 16-bit grey (a depth image?); colour needs RGB, RGBA, grey or paletted", ErrUnsupportedImage)
	case color.RGBAModel:
		bits = 24
	case color.NRGBAModel:
		bits = 16 // 8-bit grey with alpha
	case color.RGBA64Model:
		bits = 48
	case color.NRGBA64Model:
		bits = 32 // 16-bit grey with alpha
	}
	if err := checkCompressed("colour PNG", cfg, bits, len(data)); err != nil {
		return nil, err
	}
	img, err := png.Decode(bytes.NewReader(data))
	if err != nil {
		return nil, fmt.Errorf("render: colour PNG: %w", err)
	}
	b := img.Bounds()
	if b.Dx() != cfg.Width || b.Dy() != cfg.Height {
		return nil, fmt.Errorf("render: colour PNG: decoded %v, header says %d×%d", b, cfg.Width, cfg.Height)
	}
	if n, ok := img.(*image.NRGBA); ok && b.Min == (image.Point{}) {
		return n, nil
	}
	out := image.NewNRGBA(image.Rect(0, 0, b.Dx(), b.Dy()))
	draw.Draw(out, out.Rect, img, b.Min, draw.Src)
	return out, nil
}

// readPNGHeader reads the whole stream (up to maxPNGBytes) and decodes
// its header, checking the size against mesh.MaxImageSide.
func readPNGHeader(r io.Reader, what string) ([]byte, image.Config, error) {
	if r == nil {
		return nil, image.Config{}, fmt.Errorf("render: %s: nil reader", what)
	}
	data, err := io.ReadAll(io.LimitReader(r, maxPNGBytes+1))
	if err != nil {
		return nil, image.Config{}, fmt.Errorf("render: %s: %w", what, err)
	}
	if len(data) > maxPNGBytes {
		return nil, image.Config{}, fmt.Errorf("render: %s: more than %d bytes", what, int64(maxPNGBytes))
	}
	cfg, err := png.DecodeConfig(bytes.NewReader(data))
	if err != nil {
		if err == io.EOF {
			err = io.ErrUnexpectedEOF
		}
		return nil, image.Config{}, fmt.Errorf("render: %s: header: %w", what, err)
	}
	if err := checkSize(what, cfg.Width, cfg.Height); err != nil {
		return nil, image.Config{}, err
	}
	return data, cfg, nil
}

func checkSize(what string, w, h int) error {
	if w <= 0 || h <= 0 || w > mesh.MaxImageSide || h > mesh.MaxImageSide {
		return fmt.Errorf("render: %s: size %d×%d out of range 1..%d", what, w, h, mesh.MaxImageSide)
	}
	return nil
}

// checkCompressed refuses a PNG of n bytes whose header announces more
// pixels than n bytes of DEFLATE data can expand to: each of the h rows
// holds a filter byte and ⌈w·bits/8⌉ bytes of pixels.
func checkCompressed(what string, cfg image.Config, bits, n int) error {
	raw := int64(cfg.Height) * (1 + (int64(cfg.Width)*int64(bits)+7)/8)
	if need := raw / deflateMaxRatio; int64(n) < need {
		return fmt.Errorf("render: %s: %d bytes cannot hold %d×%d pixels (at least %d bytes needed): %w",
			what, n, cfg.Width, cfg.Height, need, io.ErrUnexpectedEOF)
	}
	return nil
}

// writeGray16PNG writes a 16-bit grey, non-interlaced PNG whose row y
// (2·width bytes, big-endian samples) row(y) returns; the slice may be
// reused between calls.
func writeGray16PNG(w io.Writer, width, height int, row func(y int) []byte) error {
	var idat bytes.Buffer
	zw, err := zlib.NewWriterLevel(&idat, zlib.BestSpeed)
	if err != nil {
		return err
	}
	n := 2 * width
	prev := make([]byte, n) // the row above the first is zero
	sub := make([]byte, 1+n)
	up := make([]byte, 1+n)
	sub[0], up[0] = 1, 2 // filter types Sub and Up
	for y := 0; y < height; y++ {
		cur := row(y)
		var ssub, sup int
		for i := 0; i < n; i++ {
			var left byte
			if i >= 2 { // 2 bytes per pixel
				left = cur[i-2]
			}
			a, b := cur[i]-left, cur[i]-prev[i]
			sub[1+i], up[1+i] = a, b
			ssub += absInt8(a)
			sup += absInt8(b)
		}
		f := sub
		if sup < ssub {
			f = up
		}
		if _, err := zw.Write(f); err != nil {
			return err
		}
		copy(prev, cur)
	}
	if err := zw.Close(); err != nil {
		return err
	}
	var ihdr [13]byte
	binary.BigEndian.PutUint32(ihdr[0:], uint32(width))
	binary.BigEndian.PutUint32(ihdr[4:], uint32(height))
	ihdr[8] = 16 // bit depth; colour type 0 (grey), compression, filter and interlace methods 0
	bw := bufio.NewWriter(w)
	bw.WriteString("\x89PNG\r\n\x1a\n")
	writeChunk(bw, "IHDR", ihdr[:])
	writeChunk(bw, "IDAT", idat.Bytes())
	writeChunk(bw, "IEND", nil)
	return bw.Flush() // bufio keeps the first write error
}

func absInt8(b byte) int {
	v := int(int8(b))
	if v < 0 {
		return -v
	}
	return v
}

// writeChunk writes one PNG chunk: length, type, data and the CRC-32 of
// type and data.
func writeChunk(w *bufio.Writer, typ string, data []byte) {
	var hdr [8]byte
	binary.BigEndian.PutUint32(hdr[:4], uint32(len(data)))
	copy(hdr[4:], typ)
	w.Write(hdr[:])
	w.Write(data)
	crc := crc32.NewIEEE()
	crc.Write(hdr[4:])
	crc.Write(data)
	var sum [4]byte
	binary.BigEndian.PutUint32(sum[:], crc.Sum32())
	w.Write(sum[:])
}
