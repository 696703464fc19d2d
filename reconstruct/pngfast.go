package reconstruct

import (
	"encoding/binary"
	"hash/crc32"
	"image"
	"sync"

	"github.com/scanfold/scanfold/internal/inflate"
)

// pngSignature opens every PNG file (ISO/IEC 15948:2004, 5.2).
const pngSignature = "\x89PNG\r\n\x1a\n"

// decodeSweepPNG decodes the two layouts a sweep's images come in —
// non-interlaced 16-bit greyscale (depth, converted to metres by unit)
// and non-interlaced 8-bit RGB or RGBA (colour) — straight into what a
// Frame holds, without image/png's intermediate image and per-pixel
// conversions (14 % of a handheld Fuse's CPU went to decoding, a
// third of it outside inflating). It checks what image/png checks of
// such a file (ISO/IEC 15948:2004): the signature, every chunk's CRC,
// the header's fields, the filter type of every row, the zlib stream's
// Adler-32 and that it holds exactly the image's bytes. It returns
// false for any other layout, any chunk but IHDR, IDAT and IEND, or any
// fault; the caller then decodes with image/png, which names the fault.
// w and h are the size the caller expects (the intrinsics', bounded by
// MaxPixels), so that no allocation follows an unchecked header.
func decodeSweepPNG(data []byte, depth bool, unit float64, w, h int) ([]float32, *image.NRGBA, bool) {
	if len(data) < len(pngSignature) || string(data[:len(pngSignature)]) != pngSignature {
		return nil, nil, false
	}
	bpp := 0
	var idat [][]byte
	idatLen := 0
	seenIHDR := false
	for pos := len(pngSignature); ; {
		if len(data)-pos < 12 {
			return nil, nil, false
		}
		n := binary.BigEndian.Uint32(data[pos:])
		if n > uint32(len(data)-pos-12) {
			return nil, nil, false
		}
		typ := data[pos+4 : pos+8]
		body := data[pos+8 : pos+8+int(n)]
		if crc32.ChecksumIEEE(data[pos+4:pos+8+int(n)]) != binary.BigEndian.Uint32(data[pos+8+int(n):]) {
			return nil, nil, false
		}
		pos += 12 + int(n)
		switch string(typ) {
		case "IHDR":
			if seenIHDR || len(body) != 13 {
				return nil, nil, false
			}
			seenIHDR = true
			if int64(binary.BigEndian.Uint32(body[0:])) != int64(w) || int64(binary.BigEndian.Uint32(body[4:])) != int64(h) {
				return nil, nil, false
			}
			bitDepth, colourType := body[8], body[9]
			if body[10] != 0 || body[11] != 0 || body[12] != 0 {
				return nil, nil, false // compression, filter method, interlace
			}
			switch {
			case depth && bitDepth == 16 && colourType == 0:
				bpp = 2
			case !depth && bitDepth == 8 && colourType == 2:
				bpp = 3
			case !depth && bitDepth == 8 && colourType == 6:
				bpp = 4
			default:
				return nil, nil, false
			}
		case "IDAT":
			if !seenIHDR {
				return nil, nil, false
			}
			idat = append(idat, body)
			idatLen += len(body)
		case "IEND":
			if !seenIHDR || len(idat) == 0 {
				return nil, nil, false
			}
			return decodeRows(idat, idatLen, bpp, unit, w, h)
		default:
			return nil, nil, false
		}
	}
}

// rawPool holds the buffers decodeRows inflates into, one image's
// filtered rows each.
var rawPool sync.Pool

// decodeRows inflates the IDAT chunks' zlib stream (internal/inflate,
// which accepts what compress/zlib accepts) and undoes each row's
// filter (ISO/IEC 15948:2004, 9.2), writing depth (bpp 2) or colour
// (bpp 3 or 4).
func decodeRows(idat [][]byte, idatLen, bpp int, unit float64, w, h int) ([]float32, *image.NRGBA, bool) {
	stream := idat[0]
	if len(idat) > 1 {
		stream = make([]byte, 0, idatLen)
		for _, b := range idat {
			stream = append(stream, b...)
		}
	}
	stride := w * bpp
	n := h * (1 + stride)
	bp, _ := rawPool.Get().(*[]byte)
	if bp == nil {
		bp = new([]byte)
	}
	defer rawPool.Put(bp)
	if cap(*bp) < n {
		*bp = make([]byte, n)
	}
	raw := (*bp)[:n]
	if inflate.Zlib(raw, stream) != nil {
		return nil, nil, false
	}
	var dep []float32
	var col *image.NRGBA
	if bpp == 2 {
		dep = make([]float32, w*h)
	} else {
		col = image.NewNRGBA(image.Rect(0, 0, w, h))
	}
	prev := make([]byte, stride) // the row above the first: zeros
	for y := 0; y < h; y++ {
		cur := raw[y*(1+stride) : (y+1)*(1+stride)]
		row := cur[1:]
		if !unfilter(cur[0], row, prev, bpp) {
			return nil, nil, false
		}
		switch bpp {
		case 2:
			out := dep[y*w : (y+1)*w]
			for x := range out {
				v := uint16(row[2*x])<<8 | uint16(row[2*x+1])
				out[x] = float32(float64(v) * unit)
			}
		case 3:
			out := col.Pix[y*col.Stride : y*col.Stride+4*w]
			for x := 0; x < w; x++ {
				out[4*x], out[4*x+1], out[4*x+2], out[4*x+3] = row[3*x], row[3*x+1], row[3*x+2], 0xff
			}
		case 4:
			copy(col.Pix[y*col.Stride:y*col.Stride+4*w], row)
		}
		prev = row
	}
	return dep, col, true
}

// unfilter undoes filter type ft on row cur given the unfiltered row
// above, prev (zeros for the first), for bpp bytes a pixel; false for
// an unknown filter type.
func unfilter(ft byte, cur, prev []byte, bpp int) bool {
	prev = prev[:len(cur)]
	switch ft {
	case 0:
	case 1: // Sub
		for i := bpp; i < len(cur); i++ {
			cur[i] += cur[i-bpp]
		}
	case 2: // Up
		for i, p := range prev {
			cur[i] += p
		}
	case 3: // Average
		for i := 0; i < bpp; i++ {
			cur[i] += prev[i] / 2
		}
		for i := bpp; i < len(cur); i++ {
			cur[i] += uint8((int(cur[i-bpp]) + int(prev[i])) / 2)
		}
	case 4: // Paeth
		for i := 0; i < bpp; i++ {
			cur[i] += prev[i] // a and c are 0: the predictor is b
		}
		for i := bpp; i < len(cur); i++ {
			cur[i] += paeth(cur[i-bpp], prev[i], prev[i-bpp])
		}
	default:
		return false
	}
	return true
}

// paeth is the Paeth predictor of ISO/IEC 15948:2004, 9.4: of a (left),
// b (above) and c (above left), the one nearest a + b − c, preferring
// a, then b, on ties. It is written without branches on the data (the
// compiler turns the selections into conditional moves): on noisy depth
// rows the branches were mispredicted often.
func paeth(a, b, c uint8) uint8 {
	ia, ib, ic := int32(a), int32(b), int32(c)
	pa, pb, pc := ib-ic, ia-ic, ia+ib-2*ic
	pa = (pa ^ pa>>31) - pa>>31
	pb = (pb ^ pb>>31) - pb>>31
	pc = (pc ^ pc>>31) - pc>>31
	r, m := c, pc
	if pb <= pc {
		r, m = b, pb
	}
	if pa <= m {
		r = a
	}
	return r
}
