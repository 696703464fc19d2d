package features

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"math"
	"os"
	"path/filepath"

	"github.com/scanfold/scanfold/mesh"
)

// The PPF table file, our own format (version 1). All integers and
// floats are little-endian; floats are IEEE-754.
//
//	offset  size    field
//	0       8       magic "SFPPFTB\n" (53 46 50 50 46 54 42 0A)
//	8       4       format version, uint32 = 1
//	12      4       flags, uint32: bit 0 = planar pairs skipped
//	                (Params.SkipPlanar); other bits 0
//	16      8       distance step τ_d, float64 (fraction of the diameter)
//	24      4       angle bins n, uint32 (even, 4..64)
//	28      4       fine φ levels L = n·⌊256/n⌋, uint32 (redundant, checked)
//	32      4       distance bins nD = ⌊1/τ_d⌋ + 1, uint32 (redundant, checked)
//	36      4       reserved, uint32 = 0
//	40      8       diameter (metres), float64: the cloud's largest
//	                point-to-point distance (recomputed and checked)
//	48      8       sampling spacing (metres), float64 (≥ 0)
//	56      32      SHA-256 of the cloud's canonical bytes (CloudHash)
//	88      4       point count N, uint32 (≤ 65535)
//	92      4       distinct key count K, uint32 (≤ nD·(n/2)³)
//	96      4       entry count E, uint32 (≤ N·(N−1))
//	100     4·K     keys, uint32, strictly increasing, < nD·(n/2)³
//	.       4·(K+1) offsets, uint32: offsets[0] = 0, strictly
//	                increasing, offsets[K] = E
//	.       2·E     reference point of each entry, uint16, < N
//	.       E       φ level of each entry, uint8, < L
//	.       4       CRC-32C (Castagnoli) of every byte before it, uint32
//
// The file is exactly 108 + 8·K + 3·E bytes. A key k packs the bins as
// ((d·f + a1)·f + a2)·f + a3 with f = n/2 (see the package doc).
const (
	tableMagic      = "SFPPFTB\n"
	tableVersion    = 1
	tableHeaderSize = 100
	flagSkipPlanar  = 1

	// MaxTableFileBytes bounds the bytes ReadTables reads: the largest
	// table of MaxModelPoints points with every pair stored is about
	// 12.9 GB, far beyond any practical model; 4 GiB keeps a reader from
	// exhausting memory on a hostile stream.
	MaxTableFileBytes = 4 << 30
)

var castagnoli = crc32.MakeTable(crc32.Castagnoli)

// tableFileSize returns the exact file size for k keys and e entries.
func tableFileSize(k, e uint64) uint64 { return tableHeaderSize + 4*k + 4*(k+1) + 3*e + 4 }

// MarshalTables returns the table file bytes of m.
func MarshalTables(m *Model) []byte {
	k, e := uint64(len(m.keys)), uint64(len(m.refs))
	b := make([]byte, 0, tableFileSize(k, e))
	le := binary.LittleEndian
	b = append(b, tableMagic...)
	b = le.AppendUint32(b, tableVersion)
	var flags uint32
	if m.Params.SkipPlanar {
		flags |= flagSkipPlanar
	}
	b = le.AppendUint32(b, flags)
	b = le.AppendUint64(b, math.Float64bits(m.Params.DistanceStep))
	b = le.AppendUint32(b, uint32(m.Params.AngleBins))
	b = le.AppendUint32(b, uint32(m.q.alphaLevels))
	b = le.AppendUint32(b, uint32(m.q.distBins))
	b = le.AppendUint32(b, 0)
	b = le.AppendUint64(b, math.Float64bits(m.Diameter))
	b = le.AppendUint64(b, math.Float64bits(m.Spacing))
	b = append(b, m.CloudHash[:]...)
	b = le.AppendUint32(b, uint32(len(m.cloud.Points)))
	b = le.AppendUint32(b, uint32(k))
	b = le.AppendUint32(b, uint32(e))
	for _, v := range m.keys {
		b = le.AppendUint32(b, v)
	}
	for _, v := range m.offsets {
		b = le.AppendUint32(b, v)
	}
	for _, v := range m.refs {
		b = le.AppendUint16(b, v)
	}
	b = append(b, m.phis...)
	return le.AppendUint32(b, crc32.Checksum(b, castagnoli))
}

// WriteTables writes m's table file to w.
func WriteTables(w io.Writer, m *Model) error {
	if _, err := w.Write(MarshalTables(m)); err != nil {
		return fmt.Errorf("features: writing tables: %w", err)
	}
	return nil
}

// SaveTables writes m's table file to path atomically: to a temporary
// file in the same folder, synced and then renamed, so that an
// interrupted save leaves no partial file.
func SaveTables(path string, m *Model) (err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, ".tables-*")
	if err != nil {
		return fmt.Errorf("features: saving tables to %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	if _, err = f.Write(MarshalTables(m)); err != nil {
		return fmt.Errorf("features: saving tables to %s: %w", path, err)
	}
	if err = f.Sync(); err != nil {
		return fmt.Errorf("features: saving tables to %s: %w", path, err)
	}
	if err = f.Close(); err != nil {
		return fmt.Errorf("features: saving tables to %s: %w", path, err)
	}
	if err = os.Rename(f.Name(), path); err != nil {
		return fmt.Errorf("features: saving tables to %s: %w", path, err)
	}
	return nil
}

// LoadTables reads the table file at path and checks it against cloud,
// the oriented cloud it must have been built from.
func LoadTables(path string, cloud *mesh.Cloud) (*Model, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("features: %w", err)
	}
	defer f.Close()
	m, err := ReadTables(f, cloud)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// ReadTables reads a table file from r and checks all of it: magic,
// version, parameters, exact length, checksum, that it belongs to cloud
// (same canonical SHA-256 and diameter), and every key, offset, point
// index and φ level. Counts never drive an allocation before they are
// checked against the bytes actually read. Errors wrap ErrInvalid,
// ErrUnsupported or ErrWrongCloud and name the byte offset of the field.
func ReadTables(r io.Reader, cloud *mesh.Cloud) (*Model, error) {
	data, err := io.ReadAll(io.LimitReader(r, MaxTableFileBytes+1))
	if err != nil {
		return nil, fmt.Errorf("features: reading tables: %w", err)
	}
	if len(data) > MaxTableFileBytes {
		return nil, fmt.Errorf("features: table file is larger than %d bytes: %w", int64(MaxTableFileBytes), ErrInvalid)
	}
	return UnmarshalTables(data, cloud)
}

func invalidAt(off int, format string, args ...any) error {
	return fmt.Errorf("features: table file: byte %d: %s: %w", off, fmt.Sprintf(format, args...), ErrInvalid)
}

// UnmarshalTables decodes table file bytes; see ReadTables.
func UnmarshalTables(data []byte, cloud *mesh.Cloud) (*Model, error) {
	le := binary.LittleEndian
	if len(data) < tableHeaderSize+8 {
		if len(data) >= 8 && string(data[:8]) != tableMagic {
			return nil, invalidAt(0, "bad magic %q, not a scanfold PPF table file", data[:8])
		}
		return nil, fmt.Errorf("features: table file is %d bytes, shorter than its %d-byte header and checksum: %w (%w)", len(data), tableHeaderSize+8, io.ErrUnexpectedEOF, ErrInvalid)
	}
	if string(data[:8]) != tableMagic {
		return nil, invalidAt(0, "bad magic %q, not a scanfold PPF table file", data[:8])
	}
	if v := le.Uint32(data[8:]); v != tableVersion {
		return nil, fmt.Errorf("features: table file: byte 8: format version %d, this build reads version %d: %w", v, tableVersion, ErrUnsupported)
	}
	u32 := func(off int) uint32 { return le.Uint32(data[off:]) }
	f64 := func(off int) float64 { return math.Float64frombits(le.Uint64(data[off:])) }
	nPts, nKeys, nEnt := u32(88), u32(92), u32(96)
	// Exact length first: it covers every count in the header, and it
	// must hold before the checksum can even be located.
	if want := tableFileSize(uint64(nKeys), uint64(nEnt)); uint64(len(data)) != want {
		return nil, invalidAt(92, "%d keys and %d entries need a file of %d bytes, the file has %d", nKeys, nEnt, want, len(data))
	}
	body := len(data) - 4
	if got, want := crc32.Checksum(data[:body], castagnoli), le.Uint32(data[body:]); got != want {
		return nil, invalidAt(body, "CRC-32C is %08x, the data gives %08x: the file is corrupt", want, got)
	}
	flags := u32(12)
	if flags&^flagSkipPlanar != 0 {
		return nil, invalidAt(12, "unknown flags %#x", flags)
	}
	p := Params{DistanceStep: f64(16), AngleBins: int(u32(24)), SkipPlanar: flags&flagSkipPlanar != 0}
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("features: table file: bytes 16–27: %w", err)
	}
	if l := u32(28); int(l) != p.AngleBins*alphaSubdivision(p.AngleBins) {
		return nil, invalidAt(28, "%d φ levels, %d angle bins need %d", l, p.AngleBins, p.AngleBins*alphaSubdivision(p.AngleBins))
	}
	if d := u32(32); int(d) != distanceBins(p.DistanceStep) {
		return nil, invalidAt(32, "%d distance bins, step %v needs %d", d, p.DistanceStep, distanceBins(p.DistanceStep))
	}
	if u32(36) != 0 {
		return nil, invalidAt(36, "reserved field is %d, want 0", u32(36))
	}
	diam, spacing := f64(40), f64(48)
	if !(diam > 0) || math.IsInf(diam, 0) {
		return nil, invalidAt(40, "diameter %v, want a positive finite length", diam)
	}
	if !(spacing >= 0) || math.IsInf(spacing, 0) {
		return nil, invalidAt(48, "sampling spacing %v, want a finite length ≥ 0", spacing)
	}
	if nPts > MaxModelPoints {
		return nil, invalidAt(88, "%d points, more than %d", nPts, MaxModelPoints)
	}
	if uint64(nEnt) > uint64(nPts)*uint64(max(nPts, 1)-1) {
		return nil, invalidAt(96, "%d entries for %d points, more than the %d ordered pairs", nEnt, nPts, uint64(nPts)*uint64(max(nPts, 1)-1))
	}
	m := &Model{Params: p, Diameter: diam, Spacing: spacing}
	copy(m.CloudHash[:], data[56:88])
	// The cloud: same count, same canonical bytes, same diameter.
	if cloud == nil {
		return nil, fmt.Errorf("features: no cloud given to check the table against: %w", ErrWrongCloud)
	}
	if len(cloud.Points) != int(nPts) {
		return nil, fmt.Errorf("features: table file: byte 88: the table was built from %d points, the cloud has %d: %w", nPts, len(cloud.Points), ErrWrongCloud)
	}
	cc, nrm, err := canonicalCloud(cloud)
	if err != nil {
		return nil, err
	}
	if h := CloudHash(cc); !bytes.Equal(h[:], m.CloudHash[:]) {
		return nil, fmt.Errorf("features: table file: byte 56: the table was built from a cloud with SHA-256 %x, this cloud's is %x: %w", m.CloudHash[:8], h[:8], ErrWrongCloud)
	}
	m.cloud, m.nrm = cc, nrm
	if d, _ := diameterAndSpacing(cc.Points, workerCount(0)); d != diam {
		return nil, invalidAt(40, "diameter %v, the cloud's is %v", diam, d)
	}
	m.prepare()
	if uint64(nKeys) > uint64(m.q.keySpace) {
		return nil, invalidAt(92, "%d keys, more than the %d possible", nKeys, m.q.keySpace)
	}
	// Sections; the length check above guarantees they are all there.
	off := tableHeaderSize
	m.keys = make([]uint32, nKeys)
	for i := range m.keys {
		k := u32(off)
		if int(k) >= m.q.keySpace {
			return nil, invalidAt(off, "key %d is %d, outside the key space of %d", i, k, m.q.keySpace)
		}
		if i > 0 && k <= m.keys[i-1] {
			return nil, invalidAt(off, "key %d (%d) does not increase", i, k)
		}
		m.keys[i] = k
		off += 4
	}
	m.offsets = make([]uint32, nKeys+1)
	for i := range m.offsets {
		o := u32(off)
		switch {
		case i == 0 && o != 0:
			return nil, invalidAt(off, "the first offset is %d, want 0", o)
		case i > 0 && o <= m.offsets[i-1]:
			return nil, invalidAt(off, "offset %d (%d) does not increase", i, o)
		case o > nEnt:
			return nil, invalidAt(off, "offset %d (%d) is beyond the %d entries", i, o, nEnt)
		case i == int(nKeys) && o != nEnt:
			return nil, invalidAt(off, "the last offset is %d, want the entry count %d", o, nEnt)
		}
		m.offsets[i] = o
		off += 4
	}
	m.refs = make([]uint16, nEnt)
	for i := range m.refs {
		r := le.Uint16(data[off:])
		if uint32(r) >= nPts {
			return nil, invalidAt(off, "entry %d refers to point %d of %d", i, r, nPts)
		}
		m.refs[i] = r
		off += 2
	}
	m.phis = make([]uint8, nEnt)
	for i := range m.phis {
		if int(data[off]) >= m.q.alphaLevels {
			return nil, invalidAt(off, "entry %d has φ level %d, want < %d", i, data[off], m.q.alphaLevels)
		}
		m.phis[i] = data[off]
		off++
	}
	if off != body {
		// Unreachable after the exact length check; kept as an invariant.
		return nil, errors.New("features: table file: internal section arithmetic")
	}
	m.index()
	return m, nil
}
