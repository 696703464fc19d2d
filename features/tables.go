package features

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// Limits on tables, checked when building and when reading a file.
const (
	// MaxModelPoints bounds a model cloud: entries store the reference
	// point as a uint16, and n·(n−1) ordered pairs must fit a uint32.
	MaxModelPoints = math.MaxUint16
	// MinAngleBins and MaxAngleBins bound Params.AngleBins; it must be
	// even (the feature angles get AngleBins/2 bins over [0, π]) and at
	// most 64 so that one α bit-mask per key fits a uint64.
	MinAngleBins = 4
	MaxAngleBins = 64
	// MinDistanceStep and MaxDistanceStep bound Params.DistanceStep (a
	// fraction of the diameter): at most 201 distance bins.
	MinDistanceStep = 0.005
	MaxDistanceStep = 1.0
)

// ErrInvalid is wrapped by errors for input that breaks the rules of the
// data (a table file that fails a check, a cloud without normals).
var ErrInvalid = errors.New("features: invalid input")

// ErrUnsupported is wrapped by errors for well-formed input this version
// does not handle (a table file of a later format version).
var ErrUnsupported = errors.New("features: unsupported input")

// ErrWrongCloud is wrapped by the error of ReadTables when the table was
// built from a cloud other than the one given.
var ErrWrongCloud = errors.New("features: table does not belong to this cloud")

// Params are a table's quantisation parameters; they are stored in the
// table file, and voting uses the model's own.
type Params struct {
	// DistanceStep is τ_d, the distance quantisation step as a fraction
	// of the model diameter (Drost et al. 2010 use 0.05, also their
	// sampling step), in [MinDistanceStep, MaxDistanceStep].
	// DEFAULT: 0.05
	DistanceStep float64
	// AngleBins is n_angle of Drost et al. (2010): the angle step is
	// 2π/n, so the three feature angles in [0, π] get n/2 bins and α in
	// [−π, π) gets n bins. Even, in [MinAngleBins, MaxAngleBins].
	// DEFAULT: 30 (12°)
	AngleBins int
	// SkipPlanar leaves out pairs whose quantised feature is that of two
	// points on one plane: both normals in the bins touching 90° to d and
	// in bin 0 to each other. Such pairs say only "a plane is here", yet
	// on parts with flat faces (and on a scene's support plane) they are
	// the most frequent key by far, so each one costs thousands of
	// votes; leaving them out keeps voting within its time budget (see
	// the package doc). Voting skips the matching scene pairs too.
	// DEFAULT: true
	SkipPlanar bool
}

// DefaultParams returns the documented defaults.
func DefaultParams() Params {
	return Params{DistanceStep: 0.05, AngleBins: 30, SkipPlanar: true}
}

// Validate reports parameters out of range.
func (p Params) Validate() error {
	if !(p.DistanceStep >= MinDistanceStep && p.DistanceStep <= MaxDistanceStep) {
		return fmt.Errorf("features: distance step %v (fraction of the diameter) outside [%v, %v]: %w", p.DistanceStep, MinDistanceStep, MaxDistanceStep, ErrInvalid)
	}
	if p.AngleBins < MinAngleBins || p.AngleBins > MaxAngleBins || p.AngleBins%2 != 0 {
		return fmt.Errorf("features: %d angle bins, want an even number in [%d, %d]: %w", p.AngleBins, MinAngleBins, MaxAngleBins, ErrInvalid)
	}
	return nil
}

// TableOptions tunes BuildTables.
type TableOptions struct {
	Params
	// Spacing is the sampling step (metres) the cloud was made with,
	// recorded in the table so that a scene can be sampled alike. 0
	// means unknown: the median nearest-neighbour distance of the cloud
	// is recorded instead.
	// DEFAULT: 0
	Spacing float64
	// Workers is the number of goroutines; 0 means GOMAXPROCS. The
	// result does not depend on it.
	// DEFAULT: 0
	Workers int
}

// DefaultTableOptions returns the documented defaults.
func DefaultTableOptions() TableOptions {
	return TableOptions{Params: DefaultParams()}
}

// Model is an oriented model cloud with its PPF tables (Drost et al.
// 2010): for every quantised feature, the ordered pairs of model points
// that have it, each stored as its reference point and the angle φ_m of
// its paired point about the reference normal.
//
// Layout: the distinct keys in increasing order, offsets into one flat
// entry array (entries of key i are offsets[i] … offsets[i+1]−1, ordered
// by reference point and then paired point), and the entries as two
// parallel arrays: the reference point (uint16) and φ_m (uint8) — three
// bytes a pair, plus eight bytes a distinct key, plus a dense index from
// key to position (four bytes for each of the nD·(n/2)³ possible keys)
// for constant-time look-up. A Model is read-only once built and may be
// used by any number of goroutines at once.
type Model struct {
	// Params are the quantisation parameters.
	Params Params
	// Diameter is the cloud's diameter (metres): the largest distance
	// between two of its points.
	Diameter float64
	// Spacing is the sampling step (metres) recorded for the cloud.
	Spacing float64
	// CloudHash is the SHA-256 of the cloud's canonical bytes (CloudHash).
	CloudHash [32]byte

	cloud    *mesh.Cloud // canonical: float32-rounded points and normals
	nrm      []r3.Vec    // unit normals (canonical normals renormalised)
	rot      []mesh.Mat3 // AlignToX of each normal
	q        *quantizer
	keys     []uint32
	offsets  []uint32
	refs     []uint16
	phis     []uint8
	keyIndex []int32 // key → index into keys, or −1

	// For Vote's verification, built on first use: a k-d tree of the
	// cloud, its centroid and the largest distance from it.
	verifyOnce sync.Once
	verifyTree *mesh.KDTree
	centre     r3.Vec
	radius     float64
}

// tree returns the k-d tree of the model's cloud (with its centre and
// radius), building them on first use.
func (m *Model) tree() *mesh.KDTree {
	m.verifyOnce.Do(func() {
		pts := m.cloud.Points
		m.verifyTree = mesh.NewKDTree(pts)
		for _, p := range pts {
			m.centre = r3.Add(m.centre, p)
		}
		if len(pts) > 0 {
			m.centre = r3.Scale(1/float64(len(pts)), m.centre)
		}
		for _, p := range pts {
			m.radius = math.Max(m.radius, r3.Norm(r3.Sub(p, m.centre)))
		}
	})
	return m.verifyTree
}

// Cloud returns the model's cloud: the input's points and normals
// rounded to float32 (the canonical values the tables and CloudHash are
// computed from) and its colours. It is shared: do not modify it.
func (m *Model) Cloud() *mesh.Cloud { return m.cloud }

// Pairs returns the number of stored pairs (table entries).
func (m *Model) Pairs() int { return len(m.refs) }

// Keys returns the number of distinct quantised features in the table.
func (m *Model) Keys() int { return len(m.keys) }

// DistanceStep returns the distance quantisation step in metres.
func (m *Model) DistanceStep() float64 { return m.q.distStep }

// MemoryBytes returns the bytes held by the tables: entries, keys,
// offsets and the dense key index (not the cloud).
func (m *Model) MemoryBytes() int {
	return 2*len(m.refs) + len(m.phis) + 4*len(m.keys) + 4*len(m.offsets) + 4*len(m.keyIndex)
}

// CloudHash returns the SHA-256 of the canonical bytes of cloud c: the
// point count as a little-endian uint32, then every point as x, y, z
// little-endian IEEE-754 float32, then every normal likewise (nothing
// when there are no normals). Colours are not hashed: they do not enter
// the tables. Points and normals are rounded to float32 first, so a
// cloud written to PLY as float32 and read back hashes the same.
func CloudHash(c *mesh.Cloud) [32]byte {
	h := sha256.New()
	buf := make([]byte, 0, 4+12*256)
	buf = binary.LittleEndian.AppendUint32(buf, uint32(len(c.Points)))
	put := func(vs []r3.Vec) {
		for _, v := range vs {
			buf = binary.LittleEndian.AppendUint32(buf, math.Float32bits(float32(v.X)))
			buf = binary.LittleEndian.AppendUint32(buf, math.Float32bits(float32(v.Y)))
			buf = binary.LittleEndian.AppendUint32(buf, math.Float32bits(float32(v.Z)))
			if len(buf) >= 12*256 {
				h.Write(buf)
				buf = buf[:0]
			}
		}
	}
	put(c.Points)
	put(c.Normals)
	h.Write(buf)
	var sum [32]byte
	h.Sum(sum[:0])
	return sum
}

// canonicalCloud checks c and returns its float32-rounded copy and the
// renormalised unit normals. It rejects clouds without normals, with
// non-finite values, or with normals far from unit length (outside
// [0.5, 2]: not a normal at all rather than rounding).
func canonicalCloud(c *mesh.Cloud) (*mesh.Cloud, []r3.Vec, error) {
	if err := c.Validate(); err != nil {
		return nil, nil, fmt.Errorf("features: %v: %w", err, ErrInvalid)
	}
	n := len(c.Points)
	if len(c.Normals) != n {
		return nil, nil, fmt.Errorf("features: the cloud has no normals (PPF needs one per point): %w", ErrInvalid)
	}
	if n > MaxModelPoints {
		return nil, nil, fmt.Errorf("features: the cloud has %d points, more than %d: sample it more coarsely: %w", n, MaxModelPoints, ErrInvalid)
	}
	out := &mesh.Cloud{Points: make([]r3.Vec, n), Normals: make([]r3.Vec, n)}
	if c.Colors != nil {
		out.Colors = slices.Clone(c.Colors)
	}
	nrm := make([]r3.Vec, n)
	for i := 0; i < n; i++ {
		p, q := round32(c.Points[i]), round32(c.Normals[i])
		if !finiteVec(p) {
			return nil, nil, fmt.Errorf("features: point %d is not finite (%v): %w", i, c.Points[i], ErrInvalid)
		}
		l := r3.Norm(q)
		if !(l >= 0.5 && l <= 2) {
			return nil, nil, fmt.Errorf("features: normal %d has length %.3g, want a unit normal: %w", i, l, ErrInvalid)
		}
		out.Points[i], out.Normals[i] = p, q
		nrm[i] = r3.Scale(1/l, q)
	}
	return out, nrm, nil
}

func round32(v r3.Vec) r3.Vec {
	return r3.Vec{X: float64(float32(v.X)), Y: float64(float32(v.Y)), Z: float64(float32(v.Z))}
}

func finiteVec(v r3.Vec) bool {
	return !math.IsNaN(v.X+v.Y+v.Z) && !math.IsInf(v.X, 0) && !math.IsInf(v.Y, 0) && !math.IsInf(v.Z, 0)
}

func workerCount(w int) int {
	if w <= 0 {
		w = runtime.GOMAXPROCS(0)
	}
	return max(1, w)
}

// BuildTables builds the PPF model tables of cloud c (which must have
// normals) by a parallel counting sort: every worker computes the keys
// of the pairs of a contiguous range of reference points and counts them
// per key; prefix sums over (key, worker) give every worker its own
// write position in each key's run; a second pass fills the entries. The
// result is identical whatever the number of workers. Feature angles are
// quantised from their cosines (no acos in the loop; see cosBins).
//
// Pairs of coincident points are left out (their angles to d are
// undefined), and so are planar pairs when opt.SkipPlanar is set. A
// cloud of fewer than two distinct points returns an error wrapping
// mesh.ErrDegenerate.
func BuildTables(ctx context.Context, c *mesh.Cloud, opt TableOptions) (*Model, error) {
	if err := opt.Params.Validate(); err != nil {
		return nil, err
	}
	if !(opt.Spacing >= 0) || math.IsInf(opt.Spacing, 0) {
		return nil, fmt.Errorf("features: sampling spacing %v, want a finite value ≥ 0: %w", opt.Spacing, ErrInvalid)
	}
	cloud, nrm, err := canonicalCloud(c)
	if err != nil {
		return nil, err
	}
	workers := workerCount(opt.Workers)
	diam, nn := diameterAndSpacing(cloud.Points, workers)
	if !(diam > 0) {
		return nil, fmt.Errorf("features: the cloud has fewer than two distinct points: %w", mesh.ErrDegenerate)
	}
	spacing := opt.Spacing
	if spacing == 0 {
		spacing = nn
	}
	m := &Model{
		Params:    opt.Params,
		Diameter:  diam,
		Spacing:   spacing,
		CloudHash: CloudHash(cloud),
		cloud:     cloud,
		nrm:       nrm,
	}
	m.prepare()
	if err := m.fill(ctx, workers); err != nil {
		return nil, err
	}
	m.index()
	return m, nil
}

// prepare derives the quantiser and the per-point alignments.
func (m *Model) prepare() {
	m.q = newQuantizer(m.Params, m.Diameter)
	m.rot = make([]mesh.Mat3, len(m.nrm))
	for i, n := range m.nrm {
		m.rot[i] = AlignToX(n)
	}
}

// skipKey marks a pair that is not stored.
const skipKey = math.MaxUint32

// modelPairKey returns the key and fine φ level of the model pair
// (i, j), or skipKey.
func (m *Model) modelPairKey(i, j int) (uint32, uint8) {
	q := m.q
	pi, pj := m.cloud.Points[i], m.cloud.Points[j]
	d := r3.Vec{X: pj.X - pi.X, Y: pj.Y - pi.Y, Z: pj.Z - pi.Z}
	d2 := d.X*d.X + d.Y*d.Y + d.Z*d.Z
	if d2 == 0 {
		return skipKey, 0
	}
	dist := math.Sqrt(d2)
	inv := 1 / dist
	ni, nj := m.nrm[i], m.nrm[j]
	a1 := q.feat.bin((ni.X*d.X + ni.Y*d.Y + ni.Z*d.Z) * inv)
	a2 := q.feat.bin((nj.X*d.X + nj.Y*d.Y + nj.Z*d.Z) * inv)
	a3 := q.feat.bin(ni.X*nj.X + ni.Y*nj.Y + ni.Z*nj.Z)
	if m.Params.SkipPlanar && q.planar(a1, a2, a3) {
		return skipKey, 0
	}
	db := int(dist * q.invStep)
	if db >= q.distBins {
		db = q.distBins - 1
	}
	r := &m.rot[i]
	y := r[1][0]*d.X + r[1][1]*d.Y + r[1][2]*d.Z
	z := r[2][0]*d.X + r[2][1]*d.Y + r[2][2]*d.Z
	return q.key(db, a1, a2, a3), uint8(q.phi(y, z))
}

// fill computes the entries by the two-pass counting sort.
func (m *Model) fill(ctx context.Context, workers int) error {
	n := len(m.cloud.Points)
	pairs := n * (n - 1)
	workers = min(workers, max(1, n))
	keys := make([]uint32, pairs)
	phis := make([]uint8, pairs)
	ks := m.q.keySpace
	counts := make([][]uint32, workers)
	var wg sync.WaitGroup
	lo := func(w int) int { return w * n / workers }
	for w := 0; w < workers; w++ {
		counts[w] = make([]uint32, ks)
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			cnt := counts[w]
			for i := lo(w); i < lo(w+1); i++ {
				if i%64 == 0 && ctx.Err() != nil {
					return
				}
				base := i * (n - 1)
				for j := 0; j < n; j++ {
					if j == i {
						continue
					}
					slot := base + j
					if j > i {
						slot--
					}
					k, p := m.modelPairKey(i, j)
					keys[slot], phis[slot] = k, p
					if k != skipKey {
						cnt[k]++
					}
				}
			}
		}(w)
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("features: building tables: %w", err)
	}
	// Prefix sums in (key, worker) order: worker w's entries of key k
	// come after those of workers < w, which hold smaller reference
	// points, so every run is ordered by reference point whatever the
	// number of workers.
	var total uint32
	distinct := 0
	for k := 0; k < ks; k++ {
		had := false
		for w := 0; w < workers; w++ {
			c := counts[w][k]
			counts[w][k] = total
			total += c
			had = had || c > 0
		}
		if had {
			distinct++
		}
	}
	m.refs = make([]uint16, total)
	m.phis = make([]uint8, total)
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			pos := counts[w]
			for i := lo(w); i < lo(w+1); i++ {
				base := i * (n - 1)
				for s := base; s < base+n-1; s++ {
					k := keys[s]
					if k == skipKey {
						continue
					}
					e := pos[k]
					pos[k]++
					m.refs[e] = uint16(i)
					m.phis[e] = phis[s]
				}
			}
		}(w)
	}
	wg.Wait()
	// After the fill, the last worker's cursor of key k is the end of
	// k's run; the first worker's original start was overwritten, so
	// recover the starts from the ends.
	m.keys = make([]uint32, 0, distinct)
	m.offsets = make([]uint32, 0, distinct+1)
	m.offsets = append(m.offsets, 0)
	last := counts[workers-1]
	var prev uint32
	for k := 0; k < ks; k++ {
		end := last[k]
		if end > prev {
			m.keys = append(m.keys, uint32(k))
			m.offsets = append(m.offsets, end)
			prev = end
		}
	}
	return nil
}

// index builds the dense key index.
func (m *Model) index() {
	m.keyIndex = make([]int32, m.q.keySpace)
	for i := range m.keyIndex {
		m.keyIndex[i] = -1
	}
	for i, k := range m.keys {
		m.keyIndex[k] = int32(i)
	}
}

// bucket returns the entry range of key k (empty when absent) and the
// key's position, or −1.
func (m *Model) bucket(k uint32) (lo, hi uint32, at int32) {
	at = m.keyIndex[k]
	if at < 0 {
		return 0, 0, -1
	}
	return m.offsets[at], m.offsets[at+1], at
}

// diameterAndSpacing returns the largest pairwise distance of pts and
// the median nearest-neighbour distance, by an exact O(n²) scan split
// across workers (the tables cost O(n²) anyway).
func diameterAndSpacing(pts []r3.Vec, workers int) (diam, spacing float64) {
	n := len(pts)
	if n < 2 {
		return 0, 0
	}
	nn := make([]float64, n)
	maxs := make([]float64, workers)
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func(w int) {
			defer wg.Done()
			var best float64
			for i := w * n / workers; i < (w+1)*n/workers; i++ {
				p := pts[i]
				near := math.Inf(1)
				for j := 0; j < n; j++ {
					if j == i {
						continue
					}
					dx, dy, dz := pts[j].X-p.X, pts[j].Y-p.Y, pts[j].Z-p.Z
					d2 := dx*dx + dy*dy + dz*dz
					if d2 > best {
						best = d2
					}
					if d2 > 0 && d2 < near {
						near = d2
					}
				}
				nn[i] = near
			}
			maxs[w] = best
		}(w)
	}
	wg.Wait()
	for _, v := range maxs {
		diam = math.Max(diam, v)
	}
	finiteNN := nn[:0]
	for _, v := range nn {
		if !math.IsInf(v, 1) {
			finiteNN = append(finiteNN, v)
		}
	}
	if len(finiteNN) > 0 {
		slices.Sort(finiteNN)
		spacing = math.Sqrt(finiteNN[len(finiteNN)/2])
	}
	return math.Sqrt(diam), spacing
}
