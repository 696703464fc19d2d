// Package inflate decompresses a zlib stream (RFC 1950) of DEFLATE data
// (RFC 1951) whose decompressed size the caller knows, straight into
// the caller's buffer.
//
// The standard library's compress/flate streams: it reads its input a
// byte at a time through an io.ByteReader, keeps a 32 KiB window and
// copies out of it. A sweep's PNG images are whole in memory and their
// size is known from the header, so Zlib keeps 64 bits of input in a
// register, refilled eight bytes at a time, decodes codes of up to
// fastBits bits with one table look-up, and copies matches within the
// output itself. It accepts exactly the streams compress/zlib accepts
// whose output has the given size (FuzzZlib checks both ways), and
// fails on all others: the caller can then hand the data to the
// standard library for its error message.
package inflate

import (
	"encoding/binary"
	"errors"
	"hash/adler32"
)

var (
	// ErrHeader reports a zlib header that is not DEFLATE with a window
	// of at most 32 KiB and a valid check, or asks for a preset
	// dictionary.
	ErrHeader = errors.New("inflate: invalid zlib header")
	// ErrCorrupt reports DEFLATE data that breaks RFC 1951.
	ErrCorrupt = errors.New("inflate: corrupt DEFLATE data")
	// ErrTruncated reports a stream that ends before its last block or
	// its checksum.
	ErrTruncated = errors.New("inflate: stream truncated")
	// ErrSize reports decompressed data longer or shorter than the
	// buffer given.
	ErrSize = errors.New("inflate: decompressed size differs from the buffer's")
	// ErrChecksum reports an Adler-32 that does not match the data.
	ErrChecksum = errors.New("inflate: Adler-32 mismatch")
)

// Zlib decompresses the zlib stream src into dst, whose length must be
// exactly the decompressed size, and verifies its Adler-32. Bytes after
// the checksum are ignored, as compress/zlib ignores them.
func Zlib(dst, src []byte) error {
	if len(src) < 2 {
		return ErrTruncated
	}
	cmf, flg := src[0], src[1]
	if cmf&0x0f != 8 || cmf>>4 > 7 || (uint(cmf)<<8|uint(flg))%31 != 0 || flg&0x20 != 0 {
		return ErrHeader
	}
	d := decoder{src: src, pos: 2}
	end, err := d.inflate(dst)
	if err != nil {
		return err
	}
	if len(src)-end < 4 {
		return ErrTruncated
	}
	if binary.BigEndian.Uint32(src[end:]) != adler32.Checksum(dst) {
		return ErrChecksum
	}
	return nil
}

// fastBits is how many bits of input one look-up decodes: the
// literal/length codes of image data are mostly shorter.
const fastBits = 11

// huffman is one canonical Huffman code (RFC 1951, 3.2.2).
type huffman struct {
	// fast maps the next fastBits bits of input to symbol<<4 | code
	// length for codes of at most fastBits bits; 0 where a longer code
	// starts, or where no code does (an incomplete code).
	fast [1 << fastBits]uint16
	// count is the number of codes of each length; symbols lists the
	// symbols in code order. Codes longer than fastBits are decoded
	// from them bit by bit.
	count   [16]uint16
	symbols [288]uint16
}

// build makes the code for the code lengths given, one per symbol (0
// for an unused symbol). It fails on an over-subscribed code, and on an
// incomplete one unless it is a single code of one bit, which zlib and
// compress/flate accept. An empty code builds, and fails when used: no
// input decodes to a symbol.
func (h *huffman) build(lengths []uint8) bool {
	h.count = [16]uint16{}
	for _, l := range lengths {
		h.count[l]++
	}
	h.count[0] = 0
	left, codes := 1, 0
	for l := 1; l < 16; l++ {
		left <<= 1
		left -= int(h.count[l])
		codes += int(h.count[l])
		if left < 0 {
			return false
		}
	}
	if left > 0 && codes > 0 && !(codes == 1 && h.count[1] == 1) {
		return false
	}
	var offs, next [16]int
	code := 0
	for l := 1; l < 16; l++ {
		offs[l] = offs[l-1] + int(h.count[l-1])
		code = (code + int(h.count[l-1])) << 1
		next[l] = code
	}
	h.fast = [1 << fastBits]uint16{}
	for s, l := range lengths {
		if l == 0 {
			continue
		}
		h.symbols[offs[l]] = uint16(s)
		offs[l]++
		c := next[l]
		next[l]++
		if l > fastBits {
			continue
		}
		// Codes are packed starting at their most significant bit
		// into the least significant bits of the input.
		rev := 0
		for i := 0; i < int(l); i++ {
			rev = rev<<1 | (c>>i)&1
		}
		e := uint16(s)<<4 | uint16(l)
		for j := rev; j < 1<<fastBits; j += 1 << l {
			h.fast[j] = e
		}
	}
	return true
}

// decode returns symbol<<4 | code length for the code that starts
// bits, or 0 where none does.
func (h *huffman) decode(bits uint64) uint16 {
	if e := h.fast[bits&(1<<fastBits-1)]; e != 0 {
		return e
	}
	return h.slow(bits)
}

// slow decodes a code longer than fastBits (or an input that starts no
// code) bit by bit from bits, as decode returns it.
//
// It is kept out of line so that decode, which calls it rarely, is
// inlined in the decoding loop.
//
//go:noinline
func (h *huffman) slow(bits uint64) uint16 {
	code, first, index := 0, 0, 0
	for l := 1; l < 16; l++ {
		code |= int(bits & 1)
		bits >>= 1
		c := int(h.count[l])
		if code-first < c {
			return h.symbols[index+code-first]<<4 | uint16(l)
		}
		index += c
		first = (first + c) << 1
		code <<= 1
	}
	return 0
}

// Base values and extra bits of the length codes 257–285 and distance
// codes 0–29 (RFC 1951, 3.2.5).
var (
	lengthBase  = [29]uint16{3, 4, 5, 6, 7, 8, 9, 10, 11, 13, 15, 17, 19, 23, 27, 31, 35, 43, 51, 59, 67, 83, 99, 115, 131, 163, 195, 227, 258}
	lengthExtra = [29]uint8{0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0}
	distBase    = [30]uint16{1, 2, 3, 4, 5, 7, 9, 13, 17, 25, 33, 49, 65, 97, 129, 193, 257, 385, 513, 769, 1025, 1537, 2049, 3073, 4097, 6145, 8193, 12289, 16385, 24577}
	distExtra   = [30]uint8{0, 0, 0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8, 9, 9, 10, 10, 11, 11, 12, 12, 13, 13}
	// codeOrder is the order the code length code's lengths come in
	// (RFC 1951, 3.2.7).
	codeOrder = [19]uint8{16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15}
)

// fixedLit and fixedDist are the fixed codes of block type 1 (RFC 1951,
// 3.2.6), built on first use.
var fixedLit, fixedDist = func() (*huffman, *huffman) {
	var l [288]uint8
	for i := range l {
		switch {
		case i < 144:
			l[i] = 8
		case i < 256:
			l[i] = 9
		case i < 280:
			l[i] = 7
		default:
			l[i] = 8
		}
	}
	var d [32]uint8
	for i := range d {
		d[i] = 5
	}
	lit, dist := new(huffman), new(huffman)
	lit.build(l[:])
	dist.build(d[:])
	return lit, dist
}()

// decoder holds the input and the bits taken from it but not yet used.
// Past the end of src, zero bytes are taken, counted in pad: the stream
// is truncated if any of their bits is used.
type decoder struct {
	src  []byte
	pos  int    // next byte of src to take
	bits uint64 // bits taken, next one lowest
	nb   uint   // how many
	pad  int    // zero bytes taken past the end of src
	lit  huffman
	dist huffman
}

// refill tops the bit buffer up to at least 56 bits.
func (d *decoder) refill() error {
	if d.pos+8 <= len(d.src) {
		d.bits |= binary.LittleEndian.Uint64(d.src[d.pos:]) << d.nb
		d.pos += int(63-d.nb) >> 3
		d.nb |= 56
		return nil
	}
	for d.nb <= 56 {
		if d.pos < len(d.src) {
			d.bits |= uint64(d.src[d.pos]) << d.nb
			d.pos++
		} else {
			if d.pad >= 8 {
				return ErrTruncated // a bit past the end was used
			}
			d.pad++
		}
		d.nb += 8
	}
	return nil
}

// take returns the next n (≤ 32) bits; the buffer must hold them.
func (d *decoder) take(n uint) uint32 {
	v := uint32(d.bits & (1<<n - 1))
	d.bits >>= n
	d.nb -= n
	return v
}

// overrun reports whether a bit past the end of src was used.
func (d *decoder) overrun() bool {
	return int(d.nb) < 8*d.pad
}

// align drops the bits up to the next byte boundary and gives the whole
// bytes left in the buffer back to src, returning the offset of the
// next byte, or -1 if the stream ran past src's end.
func (d *decoder) align() int {
	d.take(d.nb % 8)
	back := int(d.nb/8) - d.pad
	if back < 0 {
		return -1
	}
	d.pos -= back
	d.bits, d.nb, d.pad = 0, 0, 0
	return d.pos
}

// inflate decodes blocks into dst until the last one, and returns the
// offset in src of the byte after it.
func (d *decoder) inflate(dst []byte) (int, error) {
	o := 0
	for {
		if err := d.refill(); err != nil {
			return 0, err
		}
		final := d.take(1)
		var err error
		switch d.take(2) {
		case 0:
			o, err = d.stored(dst, o)
		case 1:
			o, err = d.codes(dst, o, fixedLit, fixedDist)
		case 2:
			if err = d.dynamic(); err == nil {
				o, err = d.codes(dst, o, &d.lit, &d.dist)
			}
		default:
			err = ErrCorrupt
		}
		if err != nil {
			return 0, err
		}
		if d.overrun() {
			return 0, ErrTruncated
		}
		if final == 1 {
			break
		}
	}
	if o != len(dst) {
		return 0, ErrSize
	}
	end := d.align()
	if end < 0 {
		return 0, ErrTruncated
	}
	return end, nil
}

// stored copies a stored block (RFC 1951, 3.2.4) to dst at o.
func (d *decoder) stored(dst []byte, o int) (int, error) {
	p := d.align()
	if p < 0 || len(d.src)-p < 4 {
		return 0, ErrTruncated
	}
	n := int(binary.LittleEndian.Uint16(d.src[p:]))
	if binary.LittleEndian.Uint16(d.src[p+2:]) != ^uint16(n) {
		return 0, ErrCorrupt
	}
	p += 4
	if len(d.src)-p < n {
		return 0, ErrTruncated
	}
	if len(dst)-o < n {
		return 0, ErrSize
	}
	copy(dst[o:], d.src[p:p+n])
	d.pos = p + n
	return o + n, nil
}

// dynamic reads a dynamic block's codes (RFC 1951, 3.2.7) into d.lit
// and d.dist, with the limits compress/flate sets: at most 286
// literal/length and 30 distance codes.
func (d *decoder) dynamic() error {
	if err := d.refill(); err != nil {
		return err
	}
	nlit := int(d.take(5)) + 257
	ndist := int(d.take(5)) + 1
	nclen := int(d.take(4)) + 4
	if nlit > 286 || ndist > 30 {
		return ErrCorrupt
	}
	var cl [19]uint8
	for i := 0; i < nclen; i++ {
		if d.nb < 3 {
			if err := d.refill(); err != nil {
				return err
			}
		}
		cl[codeOrder[i]] = uint8(d.take(3))
	}
	var clh huffman // the code length code
	if !clh.build(cl[:]) {
		return ErrCorrupt
	}
	var lengths [286 + 30]uint8
	n := nlit + ndist
	for i := 0; i < n; {
		if d.nb < 16 {
			if err := d.refill(); err != nil {
				return err
			}
		}
		e := clh.decode(d.bits)
		if e == 0 {
			return ErrCorrupt
		}
		d.take(uint(e & 15))
		sym := e >> 4
		if sym < 16 {
			lengths[i] = uint8(sym)
			i++
			continue
		}
		var rep int
		var val uint8
		switch sym {
		case 16:
			if i == 0 {
				return ErrCorrupt
			}
			rep, val = 3+int(d.take(2)), lengths[i-1]
		case 17:
			rep = 3 + int(d.take(3))
		default:
			rep = 11 + int(d.take(7))
		}
		if i+rep > n {
			return ErrCorrupt
		}
		for ; rep > 0; rep-- {
			lengths[i] = val
			i++
		}
	}
	if d.overrun() {
		return ErrTruncated
	}
	if !d.lit.build(lengths[:nlit]) || !d.dist.build(lengths[nlit:n]) {
		return ErrCorrupt
	}
	return nil
}

// codes decodes a Huffman-coded block with the codes given into dst at
// o, up to its end-of-block code. The bit buffer lives in locals here,
// where the compiler keeps it in registers.
func (d *decoder) codes(dst []byte, o int, lit, dist *huffman) (int, error) {
	src := d.src
	bits, nb, pos := d.bits, d.nb, d.pos
	defer func() { d.bits, d.nb, d.pos = bits, nb, pos }()
	for {
		// 48 bits hold a length code, its extra bits, a distance code
		// and its extra bits: 15 + 5 + 15 + 13.
		if nb < 48 {
			if pos+8 <= len(src) {
				bits |= binary.LittleEndian.Uint64(src[pos:]) << nb
				pos += int(63-nb) >> 3
				nb |= 56
			} else {
				d.bits, d.nb, d.pos = bits, nb, pos
				if err := d.refill(); err != nil {
					return 0, err
				}
				bits, nb, pos = d.bits, d.nb, d.pos
			}
		}
		e := lit.decode(bits)
		if e == 0 {
			return 0, ErrCorrupt
		}
		bits >>= e & 15
		nb -= uint(e & 15)
		sym := int(e >> 4)
		if sym < 256 {
			if o >= len(dst) {
				return 0, ErrSize
			}
			dst[o] = byte(sym)
			o++
			continue
		}
		if sym == 256 {
			return o, nil
		}
		sym -= 257
		if sym >= len(lengthBase) {
			return 0, ErrCorrupt // 286 and 287, in the fixed code
		}
		eb := lengthExtra[sym]
		length := int(lengthBase[sym]) + int(bits&(1<<eb-1))
		bits >>= eb
		nb -= uint(eb)
		e = dist.decode(bits) // an empty code decodes nothing
		if e == 0 {
			return 0, ErrCorrupt
		}
		bits >>= e & 15
		nb -= uint(e & 15)
		ds := int(e >> 4)
		if ds >= len(distBase) {
			return 0, ErrCorrupt // 30 and 31, in the fixed code
		}
		eb = distExtra[ds]
		distance := int(distBase[ds]) + int(bits&(1<<eb-1))
		bits >>= eb
		nb -= uint(eb)
		if distance > o {
			return 0, ErrCorrupt
		}
		if length > len(dst)-o {
			return 0, ErrSize
		}
		if distance >= 8 && len(dst)-o >= length+8 {
			// Eight bytes at a time, each read ending at or before
			// the byte written next; the last write may run up to
			// seven bytes past the match, into output not yet
			// written.
			for i := 0; i < length; i += 8 {
				binary.LittleEndian.PutUint64(dst[o+i:], binary.LittleEndian.Uint64(dst[o-distance+i:]))
			}
		} else {
			// A match may overlap its own output: copy what lies
			// behind o, then the period it repeats, doubled each
			// time.
			out := dst[o : o+length]
			n := copy(out, dst[o-distance:o])
			for n < length {
				n += copy(out[n:], out[:n])
			}
		}
		o += length
	}
}
