package parts

import (
	"math"

	"github.com/scanfold/scanfold/mesh"
)

// hash64 mixes a lattice point and a seed into 64 well-scrambled bits
// with the SplitMix64 finaliser (Steele, Lea & Flood 2014, "Fast
// splittable pseudorandom number generators", OOPSLA,
// doi:10.1145/2660193.2660195). It is a pure function: the colour of a
// surface point never depends on evaluation order or on any global
// generator.
func hash64(ix, iy, iz int64, seed uint64) uint64 {
	z := seed ^ uint64(ix)*0x9e3779b97f4a7c15 ^ uint64(iy)*0xc2b2ae3d27d4eb4f ^ uint64(iz)*0x165667b19e3779f9
	z ^= z >> 30
	z *= 0xbf58476d1ce4e5b9
	z ^= z >> 27
	z *= 0x94d049bb133111eb
	z ^= z >> 31
	return z
}

// lattice returns the hash of a lattice point as a value in [−1, 1].
func lattice(ix, iy, iz int64, seed uint64) float64 {
	return float64(hash64(ix, iy, iz, seed)>>11)/(1<<52) - 1
}

// valueNoise returns smooth value noise in [−1, 1] at p (metres) with
// features about cell metres across: random values on the integer
// lattice of p/cell, blended trilinearly with the smoothstep weight
// 3t² − 2t³ so the noise is continuous with a continuous gradient.
func valueNoise(x, y, z, cell float64, seed uint64) float64 {
	x, y, z = x/cell, y/cell, z/cell
	fx, fy, fz := math.Floor(x), math.Floor(y), math.Floor(z)
	ix, iy, iz := int64(fx), int64(fy), int64(fz)
	tx, ty, tz := smooth(x-fx), smooth(y-fy), smooth(z-fz)
	lerp := func(a, b, t float64) float64 { return a + (b-a)*t }
	c00 := lerp(lattice(ix, iy, iz, seed), lattice(ix+1, iy, iz, seed), tx)
	c10 := lerp(lattice(ix, iy+1, iz, seed), lattice(ix+1, iy+1, iz, seed), tx)
	c01 := lerp(lattice(ix, iy, iz+1, seed), lattice(ix+1, iy, iz+1, seed), tx)
	c11 := lerp(lattice(ix, iy+1, iz+1, seed), lattice(ix+1, iy+1, iz+1, seed), tx)
	return lerp(lerp(c00, c10, ty), lerp(c01, c11, ty), tz)
}

func smooth(t float64) float64 { return t * t * (3 - 2*t) }

// shade returns c with every channel moved by delta (in 8-bit levels),
// rounded and clamped to [0, 255].
func shade(c mesh.RGB, delta float64) mesh.RGB {
	return mesh.RGB{R: clamp8(float64(c.R) + delta), G: clamp8(float64(c.G) + delta), B: clamp8(float64(c.B) + delta)}
}

func clamp8(v float64) uint8 {
	v = math.Round(v)
	if v < 0 {
		return 0
	}
	if v > 255 {
		return 255
	}
	return uint8(v)
}

// Base colours of the demo parts, 8-bit sRGB. They are our own choices,
// picked to be told apart by hue, saturation and value (Smith 1978 HSV):
// the greys and the plated steel have low saturation, the paint, bronze,
// label and print colours have high saturation or a far-off value.
var (
	powderGrey   = mesh.RGB{R: 120, G: 124, B: 128} // powder-coated steel
	paintRed     = mesh.RGB{R: 200, G: 28, B: 24}   // paint mark
	bronze       = mesh.RGB{R: 176, G: 122, B: 62}  // cast bronze
	bronzeBright = mesh.RGB{R: 204, G: 152, B: 92}  // machined bronze (bore)
	platedSteel  = mesh.RGB{R: 186, G: 189, B: 194} // zinc-plated steel
	bodyBlue     = mesh.RGB{R: 36, G: 78, B: 150}   // painted cast body
	bareSteel    = mesh.RGB{R: 168, G: 170, B: 174} // machined steel face
	labelYellow  = mesh.RGB{R: 236, G: 198, B: 32}  // label patch
	inkBlack     = mesh.RGB{R: 28, G: 28, B: 30}    // print
	kraft        = mesh.RGB{R: 186, G: 146, B: 100} // kraft cardboard
	paperWhite   = mesh.RGB{R: 240, G: 240, B: 234} // label paper
	arrowRed     = mesh.RGB{R: 214, G: 40, B: 30}   // printed arrow
)

// Noise amplitudes in 8-bit levels (the largest change a noise term can
// make to a channel) and feature sizes in metres.
const (
	coatNoise     = 6.0    // powder coat: fine speckle
	coatCell      = 0.4e-3 // 0.4 mm speckle
	metalNoise    = 5.0    // bronze, plated steel: gentle mottling
	metalCell     = 2.5e-3 // 2.5 mm mottling
	printNoise    = 3.0    // paper, cardboard, paint: faint texture
	printCell     = 1.0e-3
	noiseSeedPart = 0x5ca7f01d
)
