package validate

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// TestComparePPFAlignsPartialScans: partial scans of the valve (its
// lower 40 % cut away, which moves the principal axes) and of the
// labelbox (a near-symmetric box whose axes leave the print's
// orientation open), turned and moved at random, are brought onto the
// reference: the recovered scan-to-reference pose maps the scan's
// points to within a millimetre of where they belong (ADD against the
// true inverse motion, Hinterstoisser et al. 2012; 1 mm is half the
// default τ). The principal axes alone, refined by ICP, also succeed on
// these two (logged for comparison); the PPF candidates must not
// disturb that.
func TestComparePPFAlignsPartialScans(t *testing.T) {
	if testing.Short() {
		t.Skip("builds tables and aligns")
	}
	rng := rand.New(rand.NewPCG(17, 18))
	for _, name := range []string{"valve", "labelbox"} {
		cp := demoCheckPart(t, name)
		h := cp.part.Max.Z - cp.part.Min.Z
		partial := cutBelow(cp.mesh, 0.4*h)
		move := mesh.PoseFromAxisAngle(randomUnit(rng), math.Pi*(0.3+0.6*rng.Float64()), r3.Vec{X: 0.2, Y: -0.1, Z: 0.5})
		scan := partial.Transform(move)
		truth := move.Inv() // scan to reference
		for _, ppf := range []bool{true, false} {
			opt := DefaultCompareOptions()
			opt.PPF = ppf
			c, err := Compare(scan, cp.mesh, opt)
			if err != nil {
				t.Fatal(err)
			}
			var add float64
			for _, v := range scan.Vertices {
				add += r3.Norm(r3.Sub(c.ScanToReference.Apply(v), truth.Apply(v)))
			}
			add /= float64(len(scan.Vertices))
			t.Logf("%s PPF %v: method %s, ADD %.3f mm, precision %.3f, recall %.3f", name, ppf, c.AlignMethod, add*1e3, c.Precision, c.Recall)
			if add > 0.001 {
				t.Errorf("%s: alignment off by %.2f mm (ADD)", name, add*1e3)
			}
		}
	}
}
