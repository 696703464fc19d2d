package features

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

func buildOrFatal(t testing.TB, c *mesh.Cloud) *Model {
	t.Helper()
	m, err := BuildTables(context.Background(), c, DefaultTableOptions())
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func sameTables(a, b *Model) bool {
	return a.Params == b.Params && a.Diameter == b.Diameter && a.Spacing == b.Spacing &&
		a.CloudHash == b.CloudHash && slices.Equal(a.keys, b.keys) && slices.Equal(a.offsets, b.offsets) &&
		slices.Equal(a.refs, b.refs) && slices.Equal(a.phis, b.phis) && slices.Equal(a.keyIndex, b.keyIndex)
}

func TestTableFileRoundTrip(t *testing.T) {
	c := testCloud(60, 11)
	m := buildOrFatal(t, c)
	data := MarshalTables(m)
	if want := tableFileSize(uint64(m.Keys()), uint64(m.Pairs())); uint64(len(data)) != want {
		t.Fatalf("%d bytes, layout says %d", len(data), want)
	}
	got, err := ReadTables(bytes.NewReader(data), c)
	if err != nil {
		t.Fatal(err)
	}
	if !sameTables(m, got) {
		t.Fatal("round trip changed the tables")
	}
	// Through a file, atomically written.
	path := filepath.Join(t.TempDir(), "part.ppf")
	if err := SaveTables(path, m); err != nil {
		t.Fatal(err)
	}
	got, err = LoadTables(path, c)
	if err != nil {
		t.Fatal(err)
	}
	if !sameTables(m, got) {
		t.Fatal("file round trip changed the tables")
	}
	// The CRC is the standard library's CRC-32C (Castagnoli): recompute
	// it independently with crc32.New.
	h := crc32.New(crc32.MakeTable(crc32.Castagnoli))
	h.Write(data[:len(data)-4])
	if h.Sum32() != binary.LittleEndian.Uint32(data[len(data)-4:]) {
		t.Error("stored checksum is not CRC-32C of the preceding bytes")
	}
}

// TestTableFileRefusesOtherCloud: a table must not be used with a cloud
// it was not built from.
func TestTableFileRefusesOtherCloud(t *testing.T) {
	c := testCloud(40, 12)
	data := MarshalTables(buildOrFatal(t, c))
	other := c.Clone()
	other.Points[7].X += 1e-4
	if _, err := UnmarshalTables(data, other); !errors.Is(err, ErrWrongCloud) {
		t.Errorf("moved point: err = %v, want ErrWrongCloud", err)
	}
	other = c.Clone()
	other.Normals[3] = mesh.Normalize(r3.Add(other.Normals[3], r3.Vec{X: 0.01}))
	if _, err := UnmarshalTables(data, other); !errors.Is(err, ErrWrongCloud) {
		t.Errorf("changed normal: err = %v, want ErrWrongCloud", err)
	}
	if _, err := UnmarshalTables(data, testCloud(41, 12)); !errors.Is(err, ErrWrongCloud) {
		t.Errorf("other size: err = %v, want ErrWrongCloud", err)
	}
	// Colours do not enter the tables; a recoloured cloud is accepted.
	other = c.Clone()
	other.Colors = make([]mesh.RGB, len(other.Points))
	if _, err := UnmarshalTables(data, other); err != nil {
		t.Errorf("recoloured cloud: %v", err)
	}
}

// TestTableFileEveryByteFlipCaught flips every byte of a small table
// file (and a seeded sample of the bytes of a 1,000-point one): the
// reader must refuse every corrupted file. CRC-32C detects every error
// confined to 32 consecutive bits (a property of any CRC with a degree-
// 32 generator; Koopman 2002, DSN, "32-bit cyclic redundancy codes for
// Internet applications", DOI 10.1109/DSN.2002.1028931), so no single
// flipped byte can pass.
func TestTableFileEveryByteFlipCaught(t *testing.T) {
	small := testCloud(16, 13)
	data := MarshalTables(buildOrFatal(t, small))
	check := func(c *mesh.Cloud, data []byte, i int, x byte) {
		bad := slices.Clone(data)
		bad[i] ^= x
		if _, err := UnmarshalTables(bad, c); err == nil {
			t.Fatalf("byte %d ^ %#x not caught", i, x)
		}
	}
	for i := range data {
		check(small, data, i, 0xff)
		check(small, data, i, 0x01)
	}
	t.Logf("small file: %d bytes, all flips caught", len(data))
	if testing.Short() {
		return
	}
	big := testCloud(1000, 14)
	data = MarshalTables(buildOrFatal(t, big))
	rng := rand.New(rand.NewPCG(15, 16))
	for k := 0; k < 300; k++ {
		check(big, data, rng.IntN(len(data)), byte(1+rng.IntN(255)))
	}
	// Truncation and extension are caught too.
	if _, err := UnmarshalTables(data[:len(data)-1], big); err == nil {
		t.Error("truncated file accepted")
	}
	if _, err := UnmarshalTables(append(slices.Clone(data), 0), big); err == nil {
		t.Error("extended file accepted")
	}
}

// recrc rewrites the checksum so that structural checks are reached.
func recrc(b []byte) []byte {
	n := len(b) - 4
	binary.LittleEndian.PutUint32(b[n:], crc32.Checksum(b[:n], castagnoli))
	return b
}

// TestTableFileInvalid is the table of invalid files (with a valid
// checksum, so that each field's own check answers) and the error each
// must give.
func TestTableFileInvalid(t *testing.T) {
	c := testCloud(16, 17)
	m := buildOrFatal(t, c)
	good := MarshalTables(m)
	le := binary.LittleEndian
	k := m.Keys()
	keysAt := tableHeaderSize
	offsAt := keysAt + 4*k
	refsAt := offsAt + 4*(k+1)
	phisAt := refsAt + 2*m.Pairs()
	cases := []struct {
		name string
		edit func(b []byte) []byte
		kind error
		msg  string
	}{
		{"magic", func(b []byte) []byte { b[0] = 'X'; return b }, ErrInvalid, "byte 0: bad magic"},
		{"version", func(b []byte) []byte { le.PutUint32(b[8:], 2); return recrc(b) }, ErrUnsupported, "version 2"},
		{"flags", func(b []byte) []byte { le.PutUint32(b[12:], 6); return recrc(b) }, ErrInvalid, "unknown flags"},
		{"step", func(b []byte) []byte { le.PutUint64(b[16:], math.Float64bits(math.NaN())); return recrc(b) }, ErrInvalid, "distance step"},
		{"bins", func(b []byte) []byte { le.PutUint32(b[24:], 31); return recrc(b) }, ErrInvalid, "angle bins"},
		{"levels", func(b []byte) []byte { le.PutUint32(b[28:], 256); return recrc(b) }, ErrInvalid, "byte 28"},
		{"distbins", func(b []byte) []byte { le.PutUint32(b[32:], 20); return recrc(b) }, ErrInvalid, "byte 32"},
		{"reserved", func(b []byte) []byte { b[36] = 1; return recrc(b) }, ErrInvalid, "reserved"},
		{"diameter", func(b []byte) []byte { le.PutUint64(b[40:], math.Float64bits(-1)); return recrc(b) }, ErrInvalid, "byte 40"},
		{"diameter mismatch", func(b []byte) []byte {
			le.PutUint64(b[40:], math.Float64bits(m.Diameter*1.01))
			return recrc(b)
		}, ErrInvalid, "the cloud's is"},
		{"spacing", func(b []byte) []byte { le.PutUint64(b[48:], math.Float64bits(math.Inf(1))); return recrc(b) }, ErrInvalid, "byte 48"},
		{"hash", func(b []byte) []byte { b[60] ^= 1; return recrc(b) }, ErrWrongCloud, "SHA-256"},
		{"points", func(b []byte) []byte { le.PutUint32(b[88:], 17); return recrc(b) }, ErrWrongCloud, "byte 88"},
		{"too many points", func(b []byte) []byte { le.PutUint32(b[88:], 70000); return recrc(b) }, ErrInvalid, "byte 88"},
		{"keys count", func(b []byte) []byte { le.PutUint32(b[92:], uint32(k+1)); return recrc(b) }, ErrInvalid, "byte 92"},
		{"huge counts", func(b []byte) []byte {
			le.PutUint32(b[92:], math.MaxUint32)
			le.PutUint32(b[96:], math.MaxUint32)
			return recrc(b)
		}, ErrInvalid, "need a file of"},
		{"truncated", func(b []byte) []byte { return b[:len(b)-3] }, ErrInvalid, "need a file of"},
		{"short", func(b []byte) []byte { return b[:50] }, ErrInvalid, "shorter than"},
		{"crc", func(b []byte) []byte { b[len(b)-1] ^= 0x80; return b }, ErrInvalid, "CRC-32C"},
		{"key order", func(b []byte) []byte {
			le.PutUint32(b[keysAt+4:], le.Uint32(b[keysAt:]))
			return recrc(b)
		}, ErrInvalid, "does not increase"},
		{"key range", func(b []byte) []byte {
			le.PutUint32(b[keysAt+4*(k-1):], 21*15*15*15)
			return recrc(b)
		}, ErrInvalid, "outside the key space"},
		{"first offset", func(b []byte) []byte { le.PutUint32(b[offsAt:], 1); return recrc(b) }, ErrInvalid, "first offset"},
		{"offset order", func(b []byte) []byte {
			le.PutUint32(b[offsAt+8:], le.Uint32(b[offsAt+4:]))
			return recrc(b)
		}, ErrInvalid, "does not increase"},
		{"last offset", func(b []byte) []byte {
			le.PutUint32(b[offsAt+4*k:], le.Uint32(b[offsAt+4*k:])+5)
			return recrc(b)
		}, ErrInvalid, "beyond"},
		{"ref range", func(b []byte) []byte { le.PutUint16(b[refsAt+2:], 16); return recrc(b) }, ErrInvalid, "refers to point 16"},
		{"phi range", func(b []byte) []byte { b[phisAt+3] = 240; return recrc(b) }, ErrInvalid, "φ level 240"},
	}
	for _, tc := range cases {
		_, err := UnmarshalTables(tc.edit(slices.Clone(good)), c)
		if err == nil {
			t.Errorf("%s: accepted", tc.name)
			continue
		}
		if !errors.Is(err, tc.kind) || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%s: error %q, want %v containing %q", tc.name, err, tc.kind, tc.msg)
		}
	}
	if _, err := UnmarshalTables(good, nil); !errors.Is(err, ErrWrongCloud) {
		t.Errorf("nil cloud: %v", err)
	}
}

// fuzzCloud is the cloud the fuzz seeds were built from.
func fuzzCloud() *mesh.Cloud { return testCloud(12, 21) }

// TestWriteFuzzSeeds regenerates the seed corpus of FuzzReadTables when
// SCANFOLD_WRITE_SEEDS=1; otherwise it checks that the committed valid
// seed still decodes.
func TestWriteFuzzSeeds(t *testing.T) {
	dir := filepath.Join("testdata", "fuzz", "FuzzReadTables")
	c := fuzzCloud()
	valid := MarshalTables(buildOrFatal(t, c))
	if os.Getenv("SCANFOLD_WRITE_SEEDS") == "1" {
		opt := DefaultTableOptions()
		opt.SkipPlanar = false
		opt.AngleBins = 12
		m2, err := BuildTables(context.Background(), c, opt)
		if err != nil {
			t.Fatal(err)
		}
		seeds := map[string][]byte{
			"valid":        valid,
			"valid-coarse": MarshalTables(m2),
			"truncated":    valid[:len(valid)/2],
			"header-only":  valid[:tableHeaderSize],
			"other-cloud":  MarshalTables(buildOrFatal(t, testCloud(12, 22))),
		}
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for name, b := range seeds {
			var s strings.Builder
			s.WriteString("go test fuzz v1\n[]byte(")
			s.WriteString(quoteBytes(b))
			s.WriteString(")\n")
			if err := os.WriteFile(filepath.Join(dir, name), []byte(s.String()), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "valid")); err != nil {
		t.Fatalf("seed corpus missing: %v (run with SCANFOLD_WRITE_SEEDS=1)", err)
	}
	if _, err := UnmarshalTables(valid, c); err != nil {
		t.Fatal(err)
	}
}

func quoteBytes(b []byte) string {
	var s strings.Builder
	s.WriteByte('"')
	for _, c := range b {
		s.WriteString(`\x`)
		s.WriteByte("0123456789abcdef"[c>>4])
		s.WriteByte("0123456789abcdef"[c&15])
	}
	s.WriteByte('"')
	return s.String()
}

// FuzzReadTables feeds arbitrary bytes to the reader: it must never
// panic, and whatever it accepts must write back to the same bytes.
func FuzzReadTables(f *testing.F) {
	c := fuzzCloud()
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ReadTables(bytes.NewReader(data), c)
		if err != nil {
			if !errors.Is(err, ErrInvalid) && !errors.Is(err, ErrUnsupported) && !errors.Is(err, ErrWrongCloud) {
				t.Fatalf("error of no known kind: %v", err)
			}
			return
		}
		if out := MarshalTables(m); !bytes.Equal(out, data) {
			t.Fatalf("accepted %d bytes but writes back %d different ones", len(data), len(out))
		}
	})
}
