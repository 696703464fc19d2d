package reconstruct

import (
	"fmt"
	"image"
	"image/png"
	"io"
	"math"
)

// pngEncoder favours speed: sweeps are written once per capture and the
// depth images compress well even at the fastest level.
var pngEncoder = png.Encoder{CompressionLevel: png.BestSpeed}

// EncodeDepthPNG writes a width×height depth image in metres (row-major,
// 0 = no measurement) as a 16-bit grayscale PNG in counts of unit
// metres, rounding to the nearest count. Depths that are not finite,
// not positive, or beyond 65535 counts are written as 0 (no
// measurement), as a sensor reports out-of-range depth.
func EncodeDepthPNG(w io.Writer, depth []float32, width, height int, unit float64) error {
	if width <= 0 || height <= 0 || len(depth) != width*height {
		return fmt.Errorf("reconstruct: depth image of %d values for %d×%d pixels", len(depth), width, height)
	}
	if !(unit >= MinDepthUnit && unit <= MaxDepthUnit) {
		return fmt.Errorf("reconstruct: depth unit %v m outside [%g, %g]", unit, MinDepthUnit, MaxDepthUnit)
	}
	g := image.NewGray16(image.Rect(0, 0, width, height))
	inv := 1 / unit
	for i, d := range depth {
		c := math.Round(float64(d) * inv)
		if !(c >= 1 && c <= 65535) { // also catches NaN
			c = 0
		}
		v := uint16(c)
		g.Pix[2*i], g.Pix[2*i+1] = uint8(v>>8), uint8(v)
	}
	if err := pngEncoder.Encode(w, g); err != nil {
		return fmt.Errorf("reconstruct: writing depth PNG: %w", err)
	}
	return nil
}

// EncodeColorPNG writes an 8-bit colour image as PNG. An opaque image
// is written as RGB, which is smaller than RGBA.
func EncodeColorPNG(w io.Writer, img *image.NRGBA) error {
	var out image.Image = img
	if img.Opaque() {
		// image/png writes an *image.RGBA that is opaque as 8-bit RGB;
		// for opaque pixels premultiplied and straight alpha agree.
		out = &image.RGBA{Pix: img.Pix, Stride: img.Stride, Rect: img.Rect}
	}
	if err := pngEncoder.Encode(w, out); err != nil {
		return fmt.Errorf("reconstruct: writing colour PNG: %w", err)
	}
	return nil
}
