package validate

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
)

// HSV is a colour in the hexcone model of Smith (1978, "Color gamut
// transform pairs", SIGGRAPH, DOI 10.1145/800248.807361): hue H in
// degrees [0, 360), saturation S and value V in [0, 1]. For a grey
// (S = 0) the hue is undefined; HSVFromRGB sets it to 0 and the colour
// distances below ignore it.
type HSV struct {
	H, S, V float32
}

// HSVFromRGB converts an 8-bit sRGB colour (channels taken as fractions
// of 255, no gamma removed, as Smith's transform works on the device
// values) to HSV:
//
//	V = max(R, G, B)
//	S = (max − min)/max, or 0 when max = 0
//	H = 60°·((G − B)/(max − min))        when R is the largest,
//	    60°·(2 + (B − R)/(max − min))    when G is,
//	    60°·(4 + (R − G)/(max − min))    when B is,
//
// taken modulo 360°, and 0 when max = min (grey).
func HSVFromRGB(c mesh.RGB) HSV {
	r, g, b := int(c.R), int(c.G), int(c.B)
	mx := max(r, g, b)
	mn := min(r, g, b)
	v := float32(mx) / 255
	if mx == 0 {
		return HSV{V: 0}
	}
	d := mx - mn
	s := float32(d) / float32(mx)
	if d == 0 {
		return HSV{S: 0, V: v}
	}
	var h float32
	fd := float32(d)
	switch mx {
	case r:
		h = 60 * float32(g-b) / fd
		if h < 0 {
			h += 360
		}
	case g:
		h = 60 * (2 + float32(b-r)/fd)
	default:
		h = 60 * (4 + float32(r-g)/fd)
	}
	if h >= 360 {
		h -= 360
	}
	return HSV{H: h, S: s, V: v}
}

// RGB converts back to 8-bit sRGB by Smith's inverse (the hexcone
// sectors): with H' = H/60, sector i = ⌊H'⌋, f = H' − i,
// p = V(1 − S), q = V(1 − S·f), t = V(1 − S(1 − f)), the channels are
// (V,t,p), (q,V,p), (p,V,t), (p,q,V), (t,p,V), (V,p,q) for i = 0…5,
// rounded to the nearest of 256 levels. Out-of-range input is clamped.
func (c HSV) RGB() mesh.RGB {
	h := float64(c.H)
	s := clamp01(float64(c.S))
	v := clamp01(float64(c.V))
	if math.IsNaN(h) || math.IsInf(h, 0) {
		h = 0
	}
	h = math.Mod(h, 360)
	if h < 0 {
		h += 360
	}
	hp := h / 60
	i := int(hp)
	f := hp - float64(i)
	p := v * (1 - s)
	q := v * (1 - s*f)
	t := v * (1 - s*(1-f))
	var r, g, b float64
	switch i {
	case 0:
		r, g, b = v, t, p
	case 1:
		r, g, b = q, v, p
	case 2:
		r, g, b = p, v, t
	case 3:
		r, g, b = p, q, v
	case 4:
		r, g, b = t, p, v
	default:
		r, g, b = v, p, q
	}
	return mesh.RGB{R: to255(r), G: to255(g), B: to255(b)}
}

func clamp01(x float64) float64 {
	if !(x > 0) {
		return 0
	}
	return math.Min(x, 1)
}

func to255(x float64) uint8 { return uint8(math.Round(clamp01(x) * 255)) }

// HueDifference returns the angle between two hues in degrees, in
// [0, 180]: differences wrap at 360°, so 350° and 10° are 20° apart.
func HueDifference(a, b float64) float64 {
	d := math.Mod(math.Abs(a-b), 360)
	if math.IsNaN(d) {
		return 0
	}
	if d > 180 {
		d = 360 - d
	}
	return d
}

// ColorWeights weighs the terms of ColorDistance.
type ColorWeights struct {
	// Chroma weighs the hue-and-saturation term (the distance in the
	// chromatic plane, see ColorDistance).
	// DEFAULT: 1
	Chroma float64
	// Value weighs the squared value difference. Rendered and sensed
	// colours are shaded copies of the model's albedo, so V varies with
	// the light far more than hue and saturation do: keep it small.
	// DEFAULT: 0.25
	Value float64
	// Dark is the value below which hue and saturation are trusted
	// less: for V < Dark the chroma term is scaled by V/Dark (the lower
	// V of the pair). An 8-bit channel near V = 0.1 (max ≈ 25) moves S
	// by about 0.04 per count of noise, so the hue of dark pixels is
	// mostly noise (common practice).
	// DEFAULT: 0.12
	Dark float64
}

// DefaultColorWeights returns the documented defaults of ColorWeights.
func DefaultColorWeights() ColorWeights {
	return ColorWeights{Chroma: 1, Value: 0.25, Dark: 0.12}
}

// ColorDistance returns a distance between two HSV colours suited to
// comparing a model's albedo with a sensed, shaded colour:
//
//	d² = w_c·k·|S₁e^{iH₁} − S₂e^{iH₂}|² + w_v·(V₁ − V₂)²
//	   = w_c·k·((S₁ − S₂)² + 4·S₁·S₂·sin²(ΔH/2)) + w_v·(V₁ − V₂)²
//
// The chromatic term is the distance between the two colours placed in
// the unit disc at radius S and angle H (the HSV cylinder's cross
// section). Its hue part is weighted by S₁·S₂: a grey (S = 0) has no
// hue and contributes only its saturation difference, so greys never
// produce random hue differences, and two greys differ only in V. k
// = min(1, min(V₁, V₂)/Dark) damps the chroma of dark pixels, whose hue
// and saturation are quantisation noise. With the default weights d
// lies in [0, √(4 + 0.25)] ≈ [0, 2.06]: 0 for equal colours, 2 for
// opposite fully saturated hues, 1 between a saturated colour and a
// grey of the same value.
func ColorDistance(a, b HSV, w ColorWeights) float64 {
	return math.Sqrt(colorDistance2(a, b, w))
}

func colorDistance2(a, b HSV, w ColorWeights) float64 {
	s1, s2 := float64(a.S), float64(b.S)
	dh := HueDifference(float64(a.H), float64(b.H)) * math.Pi / 180
	sh := math.Sin(dh / 2)
	chroma := (s1-s2)*(s1-s2) + 4*s1*s2*sh*sh
	if w.Dark > 0 {
		if v := float64(min(a.V, b.V)); v < w.Dark {
			chroma *= v / w.Dark
		}
	}
	dv := float64(a.V - b.V)
	return w.Chroma*chroma + w.Value*dv*dv
}

// HSVImage converts packed 8-bit RGBA pixels (as in image.NRGBA.Pix,
// stride 4·width, alpha ignored) to HSV, one per pixel, into dst (grown
// as needed) and returns it.
func HSVImage(pix []uint8, stride, width, height int, dst []HSV) []HSV {
	n := width * height
	if cap(dst) < n {
		dst = make([]HSV, n)
	}
	dst = dst[:n]
	for y := 0; y < height; y++ {
		row := pix[y*stride:]
		for x := 0; x < width; x++ {
			o := 4 * x
			dst[y*width+x] = HSVFromRGB(mesh.RGB{R: row[o], G: row[o+1], B: row[o+2]})
		}
	}
	return dst
}
