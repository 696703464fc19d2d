package parts

import "math"

// This file holds the signed-distance primitives and operations the parts
// are built from. Every primitive returns a signed distance in metres,
// negative inside. "Exact" means the value is the Euclidean distance to
// the surface (with sign); every primitive here is exact, and the
// operations keep the 1-Lipschitz bound |f(p) − f(q)| ≤ |p − q| (min,
// max and negation of 1-Lipschitz functions are 1-Lipschitz), so every
// composed part is at least a conservative distance: |f(p)| never
// exceeds the true distance to the surface, because f vanishes on it.
// The formulas are elementary geometry, derived in the comments.
// Lengths are metres of order 1e-3 to 1e-1, so √(a² + b²) is taken
// directly: math.Hypot guards against overflow and underflow that cannot
// happen here, at a cost in the grid sampler's inner loop.

// box2 returns the exact signed distance from (x, y) to the axis-aligned
// rectangle centred at the origin with half-sizes hx, hy. Outside, the
// nearest point is on the rim and the distance is the length of the
// positive parts of q = |p| − h; inside, it is the distance to the
// nearest side, max(qx, qy).
func box2(x, y, hx, hy float64) float64 {
	return slab2(math.Abs(x)-hx, math.Abs(y)-hy)
}

// slab2 combines two signed distances a, b to the two factors of a
// product set A × B (orthogonal coordinates) into the exact distance to
// A × B: outside both, the nearest point is on the rim and the distance
// is hypot(a, b); outside one, it is that one; inside both, the nearest
// boundary is the nearer factor, max(a, b).
func slab2(a, b float64) float64 {
	if a > 0 && b > 0 {
		return math.Sqrt(a*a + b*b)
	}
	return max(a, b)
}

// box returns the exact signed distance from (x, y, z) to the
// axis-aligned box with centre (cx, cy, cz) and half-sizes hx, hy, hz:
// with q = |p − c| − h, the length of max(q, 0) outside and
// max(qx, qy, qz) inside.
func box(x, y, z, cx, cy, cz, hx, hy, hz float64) float64 {
	qx := math.Abs(x-cx) - hx
	qy := math.Abs(y-cy) - hy
	qz := math.Abs(z-cz) - hz
	if qx > 0 || qy > 0 || qz > 0 {
		ox, oy, oz := max(qx, 0), max(qy, 0), max(qz, 0)
		return math.Sqrt(ox*ox + oy*oy + oz*oz)
	}
	return max(qx, max(qy, qz))
}

// roundBox returns the exact signed distance to the box with centre c and
// half-sizes h whose edges and corners are rounded with radius r
// (0 ≤ r ≤ min(h)): the Minkowski sum of the inner box h − r and a ball
// of radius r. For a convex body K the distance to K ⊕ B(r) is d_K − r
// everywhere, inside included, because the supporting planes of the sum
// are those of K moved out by r.
func roundBox(x, y, z, cx, cy, cz, hx, hy, hz, r float64) float64 {
	return box(x, y, z, cx, cy, cz, hx-r, hy-r, hz-r) - r
}

// cylinder returns the exact signed distance to a solid circular
// cylinder given in its own coordinates: (u, v) across the axis, w along
// it; the axis passes through (u, v) = (0, 0), the radius is r and the
// cylinder spans w ∈ [w0, w1]. It is the product of a disc (distance
// hypot(u, v) − r) and an interval, combined by slab2.
func cylinder(u, v, w, r, w0, w1 float64) float64 {
	return slab2(math.Sqrt(u*u+v*v)-r, interval(w, w0, w1))
}

// interval returns the exact signed distance from w to the interval
// [w0, w1] on the line.
func interval(w, w0, w1 float64) float64 {
	return math.Abs(w-(w0+w1)/2) - (w1-w0)/2
}

// sin60 = cos 30° = √3/2, the recurring constant of the regular hexagon.
var sin60 = math.Sqrt(3) / 2

// hex2 returns the exact signed distance from (x, y) to the regular
// hexagon centred at the origin with apothem a (half the width across
// flats), corners on the ±x axis and flats facing ±y. The circumradius
// (half the width across corners) is R = 2a/√3.
//
// Derivation: the hexagon is symmetric about both axes, so fold (x, y)
// into the first quadrant; it is also symmetric about the line at 60°
// through the corner (R/2, a), so a point beyond that line is reflected
// back across it. The point then lies in the sector [0°, 60°], whose
// nearest side is the one from (R, 0) to (R/2, a) with outward normal
// n = (cos 30°, sin 30°), midpoint a·n and unit tangent
// t = (−sin 30°, cos 30°). A point in that sector is no nearer to any
// other side (the mirror images of this side across the fold lines lie
// on the far side of them), so the distance is that to the segment:
// clamp the tangential coordinate to ±R/2, and take the sign of n·p − a.
func hex2(x, y, a float64) float64 {
	px, py := math.Abs(x), math.Abs(y)
	// Mirror line at 60°: normal m = (−sin 60°, cos 60°).
	if d := -sin60*px + 0.5*py; d > 0 {
		px += 2 * d * sin60
		py -= 2 * d * 0.5
	}
	halfSide := a / sin60 / 2 // side length equals R = a/sin 60°
	// Coordinates relative to the side's midpoint a·n.
	dx, dy := px-a*sin60, py-a*0.5
	s := -0.5*dx + sin60*dy // along t
	if s > halfSide {
		s = halfSide
	} else if s < -halfSide {
		s = -halfSide
	}
	ex, ey := dx-s*(-0.5), dy-s*sin60
	d := math.Sqrt(ex*ex + ey*ey)
	if sin60*px+0.5*py < a {
		return -d
	}
	return d
}

// hexPrism returns the exact signed distance to the hexagonal prism over
// hex2(·, ·, a) spanning z ∈ [z0, z1].
func hexPrism(x, y, z, a, z0, z1 float64) float64 {
	return slab2(hex2(x, y, a), interval(z, z0, z1))
}

// vec2 is a point of a 2-D profile.
type vec2 struct{ X, Y float64 }

// polygon is a simple (non-self-intersecting) closed polygon; the last
// vertex joins the first. Profiles of solids of revolution use X as the
// radius and Y as the height and list their vertices counter-clockwise.
type polygon []vec2

// dist returns the exact signed distance from (x, y) to the polygon: the
// distance to the nearest edge segment, negative when the point is
// inside by the crossing-number (even–odd) rule, which for a simple
// polygon is the Jordan-curve inside (a standard computational-geometry
// test; see O'Rourke, Computational Geometry in C, 2nd ed. 1998, §7.4).
func (pg polygon) dist(x, y float64) float64 { return pg.distSkip(x, y, false) }

// distSkip is dist, ignoring for the distance (not for the sign) the
// edges that lie on the line x = 0 when skipAxis is set.
func (pg polygon) distSkip(x, y float64, skipAxis bool) float64 {
	best := math.Inf(1)
	inside := false
	n := len(pg)
	for i, j := 0, n-1; i < n; j, i = i, i+1 {
		a, b := pg[j], pg[i]
		ex, ey := b.X-a.X, b.Y-a.Y
		// Crossing test on the horizontal ray to +x, half-open in y so a
		// vertex on the ray is counted once.
		if (a.Y > y) != (b.Y > y) {
			if x < a.X+(y-a.Y)*ex/ey {
				inside = !inside
			}
		}
		if skipAxis && a.X == 0 && b.X == 0 {
			continue
		}
		wx, wy := x-a.X, y-a.Y
		t := 0.0
		if l2 := ex*ex + ey*ey; l2 > 0 {
			t = (wx*ex + wy*ey) / l2
			t = max(0, min(1, t))
		}
		dx, dy := wx-t*ex, wy-t*ey
		if d2 := dx*dx + dy*dy; d2 < best {
			best = d2
		}
	}
	d := math.Sqrt(best)
	if inside {
		return -d
	}
	return d
}

// revolve returns the signed distance to the solid swept by the profile
// pg (X = radius ≥ 0, Y = z) around the z axis. It is exact: the nearest
// point of a solid of revolution lies in the half-plane through the axis
// and the query point, and there the section is the profile itself (its
// mirror image across the axis is never nearer to a point with r ≥ 0).
// Profile edges on the axis itself are not surface (the solid is closed
// there) and are left out of the distance.
func (pg polygon) revolve(x, y, z float64) float64 {
	return pg.distSkip(math.Sqrt(x*x+y*y), z, true)
}

// area returns the polygon's signed area by the shoelace formula
// (positive for counter-clockwise vertices).
func (pg polygon) area() float64 {
	s := 0.0
	n := len(pg)
	for i, j := 0, n-1; i < n; j, i = i, i+1 {
		s += pg[j].X*pg[i].Y - pg[i].X*pg[j].Y
	}
	return s / 2
}

// revolvedVolume returns the volume of the solid swept by a
// counter-clockwise profile around the z axis. By Green's theorem,
// V = 2π∬ r dA = 2π∮ (r²/2) dz, and along an edge (r1, z1)→(r2, z2) the
// integral is (z2 − z1)(r1² + r1·r2 + r2²)/6, so each edge contributes a
// signed frustum volume π(z2 − z1)(r1² + r1·r2 + r2²)/3, the handbook
// frustum formula.
func (pg polygon) revolvedVolume() float64 {
	s := 0.0
	n := len(pg)
	for i, j := 0, n-1; i < n; j, i = i, i+1 {
		a, b := pg[j], pg[i]
		s += (b.Y - a.Y) * (a.X*a.X + a.X*b.X + b.X*b.X)
	}
	return math.Pi * s / 3
}

// revolvedArea returns the surface area of the solid swept by the
// profile around the z axis: each edge sweeps a frustum's lateral
// surface π(r1 + r2)·ℓ (Pappus's first centroid theorem; an edge on the
// axis sweeps nothing).
func (pg polygon) revolvedArea() float64 {
	s := 0.0
	n := len(pg)
	for i, j := 0, n-1; i < n; j, i = i, i+1 {
		a, b := pg[j], pg[i]
		s += (a.X + b.X) * math.Hypot(b.X-a.X, b.Y-a.Y)
	}
	return math.Pi * s
}

// union, intersect and subtract are the Boolean operations on signed
// distances: exact outside for union and inside for intersection, and
// conservative (never larger in magnitude than the true distance)
// elsewhere; all keep the 1-Lipschitz bound.
func union(a, b float64) float64     { return min(a, b) }
func intersect(a, b float64) float64 { return max(a, b) }
func subtract(a, b float64) float64  { return max(a, -b) }
