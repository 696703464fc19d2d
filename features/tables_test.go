package features

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// testCloud returns n oriented points: half on an ellipsoid with semi-
// axes (0.05, 0.03, 0.02) m and half on the faces of a box beside it
// (flat faces give planar pairs), with exact normals. Invented data.
func testCloud(n int, seed uint64) *mesh.Cloud {
	rng := rand.New(rand.NewPCG(seed, 99))
	c := &mesh.Cloud{}
	ax := r3.Vec{X: 0.05, Y: 0.03, Z: 0.02}
	for i := 0; i < n/2; i++ {
		u := randUnit(rng)
		c.Points = append(c.Points, r3.Vec{X: ax.X * u.X, Y: ax.Y * u.Y, Z: ax.Z * u.Z})
		c.Normals = append(c.Normals, mesh.Normalize(r3.Vec{X: u.X / ax.X, Y: u.Y / ax.Y, Z: u.Z / ax.Z}))
	}
	half := r3.Vec{X: 0.02, Y: 0.015, Z: 0.01}
	off := r3.Vec{X: 0.08}
	for i := n / 2; i < n; i++ {
		axis := rng.IntN(3)
		sign := 1.0
		if rng.IntN(2) == 0 {
			sign = -1
		}
		p := [3]float64{(2*rng.Float64() - 1) * half.X, (2*rng.Float64() - 1) * half.Y, (2*rng.Float64() - 1) * half.Z}
		h := [3]float64{half.X, half.Y, half.Z}
		p[axis] = sign * h[axis]
		var nv [3]float64
		nv[axis] = sign
		c.Points = append(c.Points, r3.Add(off, r3.Vec{X: p[0], Y: p[1], Z: p[2]}))
		c.Normals = append(c.Normals, r3.Vec{X: nv[0], Y: nv[1], Z: nv[2]})
	}
	return c
}

type oracleEntry struct {
	ref int
	phi int
}

// TestBuildTablesMatchesOracle checks the fast tables against a slow,
// obviously right construction from the definition: PairFeature with
// math.Acos, bins ⌊angle/12°⌋, φ by math.Atan2, collected in a map.
// Pairs within 1e-9 rad of a bin edge are left out of the comparison
// (rounding may put them on either side).
func TestBuildTablesMatchesOracle(t *testing.T) {
	for _, skip := range []bool{false, true} {
		c := testCloud(120, 1)
		opt := DefaultTableOptions()
		opt.SkipPlanar = skip
		m, err := BuildTables(context.Background(), c, opt)
		if err != nil {
			t.Fatal(err)
		}
		cc := m.Cloud()
		q := m.q
		w := 2 * math.Pi / 30
		wf := 2 * math.Pi / float64(q.alphaLevels)
		want := map[uint32][]oracleEntry{}
		ambiguous := map[uint32]bool{}
		nearEdge := func(x float64) bool { f := x - math.Floor(x); return f < 1e-9 || f > 1-1e-9 }
		planarPairs := 0
		for i := range cc.Points {
			for j := range cc.Points {
				if i == j {
					continue
				}
				f := PairFeature(cc.Points[i], m.nrm[i], cc.Points[j], m.nrm[j])
				d := min(q.distBins-1, int(f.Dist/q.distStep))
				a1, a2, a3 := min(14, int(f.Angle1/w)), min(14, int(f.Angle2/w)), min(14, int(f.Angle3/w))
				amb := nearEdge(f.Dist/q.distStep) || nearEdge(f.Angle1/w) || nearEdge(f.Angle2/w) || nearEdge(f.Angle3/w)
				if skip && q.planar(a1, a2, a3) {
					planarPairs++
					continue
				}
				v := AlignToX(m.nrm[i]).MulVec(r3.Sub(cc.Points[j], cc.Points[i]))
				x := (math.Atan2(v.Z, v.Y) + math.Pi) / wf
				amb = amb || nearEdge(x)
				k := q.key(d, a1, a2, a3)
				if amb {
					ambiguous[k] = true
				}
				want[k] = append(want[k], oracleEntry{i, int(x) % q.alphaLevels})
			}
		}
		if skip && planarPairs == 0 {
			t.Fatal("the test cloud has no planar pairs")
		}
		if len(m.keys) != len(want) && len(ambiguous) == 0 {
			t.Errorf("skip=%v: %d keys, oracle %d", skip, len(m.keys), len(want))
		}
		if !slices.IsSorted(m.keys) {
			t.Errorf("keys not sorted")
		}
		checked := 0
		for i, k := range m.keys {
			if ambiguous[k] {
				continue
			}
			var got []oracleEntry
			for e := m.offsets[i]; e < m.offsets[i+1]; e++ {
				got = append(got, oracleEntry{int(m.refs[e]), int(m.phis[e])})
			}
			// Entries are ordered by reference point, then paired point:
			// the oracle's loop order.
			if !slices.Equal(got, want[k]) {
				t.Fatalf("skip=%v key %d: got %v, oracle %v", skip, k, got, want[k])
			}
			checked++
		}
		if checked < len(m.keys)/2 {
			t.Errorf("only %d of %d keys compared", checked, len(m.keys))
		}
		total := 0
		for _, v := range want {
			total += len(v)
		}
		if m.Pairs() != total {
			t.Errorf("skip=%v: %d pairs, oracle %d", skip, m.Pairs(), total)
		}
	}
}

// TestBuildTablesDeterministic checks that the tables do not depend on
// the number of workers.
func TestBuildTablesDeterministic(t *testing.T) {
	c := testCloud(301, 2)
	var ref *Model
	for _, w := range []int{1, 2, 3, 8} {
		opt := DefaultTableOptions()
		opt.Workers = w
		m, err := BuildTables(context.Background(), c, opt)
		if err != nil {
			t.Fatal(err)
		}
		if ref == nil {
			ref = m
			continue
		}
		if !slices.Equal(m.keys, ref.keys) || !slices.Equal(m.offsets, ref.offsets) ||
			!slices.Equal(m.refs, ref.refs) || !slices.Equal(m.phis, ref.phis) ||
			m.Diameter != ref.Diameter || m.Spacing != ref.Spacing {
			t.Fatalf("%d workers give different tables", w)
		}
	}
}

func TestBuildTablesBytesPerPair(t *testing.T) {
	if testing.Short() {
		t.Skip("1,000-point tables")
	}
	m, err := BuildTables(context.Background(), testCloud(1000, 3), DefaultTableOptions())
	if err != nil {
		t.Fatal(err)
	}
	per := float64(m.MemoryBytes()) / float64(m.Pairs())
	t.Logf("%d pairs, %d keys, %.2f bytes/pair in memory", m.Pairs(), m.Keys(), per)
	if per > 12 {
		t.Errorf("%.2f bytes per pair, target ≤ 12", per)
	}
}

func TestBuildTablesErrors(t *testing.T) {
	ctx := context.Background()
	good := testCloud(10, 4)
	cases := map[string]func() (*mesh.Cloud, TableOptions){
		"no normals": func() (*mesh.Cloud, TableOptions) {
			c := good.Clone()
			c.Normals = nil
			return c, DefaultTableOptions()
		},
		"zero normal": func() (*mesh.Cloud, TableOptions) {
			c := good.Clone()
			c.Normals[3] = r3.Vec{}
			return c, DefaultTableOptions()
		},
		"nan point": func() (*mesh.Cloud, TableOptions) {
			c := good.Clone()
			c.Points[2].Y = math.NaN()
			return c, DefaultTableOptions()
		},
		"odd bins": func() (*mesh.Cloud, TableOptions) {
			o := DefaultTableOptions()
			o.AngleBins = 31
			return good, o
		},
		"tiny step": func() (*mesh.Cloud, TableOptions) {
			o := DefaultTableOptions()
			o.DistanceStep = 0.001
			return good, o
		},
		"one point": func() (*mesh.Cloud, TableOptions) {
			return &mesh.Cloud{Points: good.Points[:1], Normals: good.Normals[:1]}, DefaultTableOptions()
		},
		"coincident": func() (*mesh.Cloud, TableOptions) {
			p := []r3.Vec{{X: 1}, {X: 1}}
			return &mesh.Cloud{Points: p, Normals: []r3.Vec{{Z: 1}, {Z: 1}}}, DefaultTableOptions()
		},
	}
	for name, mk := range cases {
		c, o := mk()
		if _, err := BuildTables(ctx, c, o); err == nil {
			t.Errorf("%s: no error", name)
		} else {
			t.Logf("%s: %v", name, err)
		}
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if _, err := BuildTables(cctx, testCloud(200, 5), DefaultTableOptions()); err == nil {
		t.Error("cancelled context: no error")
	}
}

func BenchmarkBuildTables1000(b *testing.B) {
	c := testCloud(1000, 3)
	b.ReportAllocs()
	var m *Model
	for i := 0; i < b.N; i++ {
		var err error
		m, err = BuildTables(context.Background(), c, DefaultTableOptions())
		if err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(m.MemoryBytes())/float64(m.Pairs()), "bytes/pair")
}
