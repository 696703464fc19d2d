package validate

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/spatial/r3"

	"github.com/scanfold/scanfold/mesh"
)

// MaxHullPoints bounds the input of ConvexHull.
const MaxHullPoints = 1 << 24

// hullEpsRel is the plane-distance tolerance of ConvexHull relative to
// the diagonal of the points' bounding box: points within it of a face's
// plane count as on the face. 1e−9 is some six orders of magnitude
// above the rounding of the plane tests (a few ulps of coordinates of
// the diagonal's size, ~1e−15 relative) and far below any feature a
// part has, so coplanar grid vertices of a flat face are absorbed.
const hullEpsRel = 1e-9

type hullFace struct {
	v       [3]int // counter-clockwise seen from outside
	adj     [3]int // face across edge v[i]→v[(i+1)%3]
	n       r3.Vec // unit outward normal
	d       float64
	outside []int
	alive   bool
	mark    int
}

// ConvexHull returns the convex hull of points as a closed triangle mesh
// whose faces are counter-clockwise seen from outside, and the index
// into points of each hull vertex. It is the Quickhull algorithm
// (Barber, Dobkin & Huhdanpaa 1996, "The Quickhull algorithm for convex
// hulls", ACM TOMS 22(4), DOI 10.1145/235815.235821): start from a
// tetrahedron of extreme points, give every face the points outside it,
// and repeatedly add the farthest outside point of a face, replacing
// the faces it sees by a cone from the point to their horizon.
//
// Robustness: a point counts as outside a face only when it is more
// than ε = 1e−9 × the bounding-box diagonal above its plane, so
// coplanar and nearly coplanar points (the grid vertices on a flat face)
// never become hull vertices unless they are corners; the hull may then
// have several coplanar triangles on one flat face (StablePoses merges
// them). Points with a NaN or infinite coordinate are an error; fewer
// than four points, or all points on one plane (within ε), give an error
// wrapping mesh.ErrDegenerate.
func ConvexHull(points []r3.Vec) (*mesh.Mesh, []int, error) {
	if len(points) > MaxHullPoints {
		return nil, nil, fmt.Errorf("validate: convex hull of %d points, at most %d", len(points), MaxHullPoints)
	}
	for i, p := range points {
		if !finite3(p) {
			return nil, nil, fmt.Errorf("validate: convex hull point %d is %v", i, p)
		}
	}
	if len(points) < 4 {
		return nil, nil, fmt.Errorf("validate: convex hull of %d points: %w", len(points), mesh.ErrDegenerate)
	}
	eps := hullEpsRel * mesh.BoxOf(points).Diagonal()
	h := &quickhull{pts: points, eps: eps}
	if err := h.simplex(); err != nil {
		return nil, nil, err
	}
	if err := h.run(); err != nil {
		return nil, nil, err
	}
	return h.mesh()
}

type quickhull struct {
	pts   []r3.Vec
	eps   float64
	faces []hullFace
	mark  int
	// scratch
	visible []int
	horizon [][3]int // a, b, face beyond
	stack   []int
}

func (h *quickhull) dist(f *hullFace, p r3.Vec) float64 { return r3.Dot(f.n, p) - f.d }

func (h *quickhull) newFace(a, b, c int) int {
	pa, pb, pc := h.pts[a], h.pts[b], h.pts[c]
	n := mesh.Normalize(r3.Cross(r3.Sub(pb, pa), r3.Sub(pc, pa)))
	// The plane through the centroid of the three corners: the
	// rounding is then the same for each of them.
	cen := r3.Scale(1.0/3, r3.Add(r3.Add(pa, pb), pc))
	h.faces = append(h.faces, hullFace{v: [3]int{a, b, c}, adj: [3]int{-1, -1, -1}, n: n, d: r3.Dot(n, cen), alive: true})
	return len(h.faces) - 1
}

// simplex builds the initial tetrahedron from extreme points and hands
// every other point to the first face it is outside of.
func (h *quickhull) simplex() error {
	pts := h.pts
	// Extreme points along the axes; the farthest pair among them.
	var ext [6]int
	for i, p := range pts {
		if p.X < pts[ext[0]].X {
			ext[0] = i
		}
		if p.X > pts[ext[1]].X {
			ext[1] = i
		}
		if p.Y < pts[ext[2]].Y {
			ext[2] = i
		}
		if p.Y > pts[ext[3]].Y {
			ext[3] = i
		}
		if p.Z < pts[ext[4]].Z {
			ext[4] = i
		}
		if p.Z > pts[ext[5]].Z {
			ext[5] = i
		}
	}
	i0, i1, best := 0, 0, -1.0
	for a := 0; a < 6; a++ {
		for b := a + 1; b < 6; b++ {
			if d := r3.Norm2(r3.Sub(pts[ext[a]], pts[ext[b]])); d > best {
				i0, i1, best = ext[a], ext[b], d
			}
		}
	}
	if math.Sqrt(best) <= h.eps {
		return fmt.Errorf("validate: convex hull: all points coincide: %w", mesh.ErrDegenerate)
	}
	// The point farthest from the line i0–i1.
	dir := mesh.Normalize(r3.Sub(pts[i1], pts[i0]))
	i2, best := -1, h.eps
	for i, p := range pts {
		v := r3.Sub(p, pts[i0])
		if d := r3.Norm(r3.Sub(v, r3.Scale(r3.Dot(v, dir), dir))); d > best {
			i2, best = i, d
		}
	}
	if i2 < 0 {
		return fmt.Errorf("validate: convex hull: all points on one line: %w", mesh.ErrDegenerate)
	}
	// The point farthest from the plane i0, i1, i2.
	n := mesh.Normalize(r3.Cross(r3.Sub(pts[i1], pts[i0]), r3.Sub(pts[i2], pts[i0])))
	i3, best := -1, h.eps
	for i, p := range pts {
		if d := math.Abs(r3.Dot(n, r3.Sub(p, pts[i0]))); d > best {
			i3, best = i, d
		}
	}
	if i3 < 0 {
		return fmt.Errorf("validate: convex hull: all points on one plane: %w", mesh.ErrDegenerate)
	}
	if r3.Dot(n, r3.Sub(pts[i3], pts[i0])) > 0 {
		i1, i2 = i2, i1 // make the base face (i0, i1, i2) point away from i3
	}
	// Faces: base (i0,i1,i2) and the three sides, each CCW from outside.
	f0 := h.newFace(i0, i1, i2)
	f1 := h.newFace(i0, i3, i1)
	f2 := h.newFace(i1, i3, i2)
	f3 := h.newFace(i2, i3, i0)
	// Adjacency: edge v[k]→v[k+1] of each face.
	h.faces[f0].adj = [3]int{f1, f2, f3} // (i0,i1) (i1,i2) (i2,i0)
	h.faces[f1].adj = [3]int{f3, f2, f0} // (i0,i3) (i3,i1) (i1,i0)
	h.faces[f2].adj = [3]int{f1, f3, f0} // (i1,i3) (i3,i2) (i2,i1)
	h.faces[f3].adj = [3]int{f2, f1, f0} // (i2,i3) (i3,i0) (i0,i2)
	for i, p := range pts {
		if i == i0 || i == i1 || i == i2 || i == i3 {
			continue
		}
		for f := 0; f < 4; f++ {
			if h.dist(&h.faces[f], p) > h.eps {
				h.faces[f].outside = append(h.faces[f].outside, i)
				break
			}
		}
	}
	return nil
}

func (h *quickhull) run() error {
	for f := 0; f < len(h.faces); f++ {
		// New faces are appended, so this walks every face ever made;
		// a face is finished when it is dead or has no outside points.
		for h.faces[f].alive && len(h.faces[f].outside) > 0 {
			if err := h.addPoint(f); err != nil {
				return err
			}
		}
	}
	return nil
}

// addPoint adds the farthest outside point of face f to the hull.
func (h *quickhull) addPoint(f int) error {
	face := &h.faces[f]
	eye, far := -1, -1.0
	for _, i := range face.outside {
		if d := h.dist(face, h.pts[i]); d > far {
			eye, far = i, d
		}
	}
	p := h.pts[eye]
	// Visible faces by depth-first search from f; the horizon is the
	// ring of edges between a visible and an invisible face, collected
	// in order by walking each visible face's edges counter-clockwise.
	h.mark++
	h.visible = h.visible[:0]
	h.horizon = h.horizon[:0]
	h.visitFace(f, p)
	// The horizon must be one closed ring, each edge starting where the
	// previous one ends; rounding in the visibility tests of nearly
	// degenerate input could in principle break that.
	for k, e := range h.horizon {
		if e[1] != h.horizon[(k+1)%len(h.horizon)][0] {
			return fmt.Errorf("validate: convex hull: horizon of point %d is not a ring (numerically degenerate input): %w", eye, mesh.ErrDegenerate)
		}
	}
	// One new face per horizon edge (a, b): (a, b, eye).
	first := len(h.faces)
	for _, e := range h.horizon {
		nf := h.newFace(e[0], e[1], eye)
		h.faces[nf].adj[0] = e[2]
		beyond := &h.faces[e[2]]
		for j := 0; j < 3; j++ {
			if beyond.v[j] == e[1] && beyond.v[(j+1)%3] == e[0] {
				beyond.adj[j] = nf
			}
		}
	}
	// The horizon is a closed ring in order, so new face k meets new
	// face k+1 along (b_k, eye) = (a_{k+1}, eye).
	m := len(h.horizon)
	for k := 0; k < m; k++ {
		cur := first + k
		next := first + (k+1)%m
		h.faces[cur].adj[1] = next // edge (b, eye)
		h.faces[next].adj[2] = cur // edge (eye, a)
	}
	// Hand the visible faces' outside points to the new faces.
	for _, vf := range h.visible {
		for _, i := range h.faces[vf].outside {
			if i == eye {
				continue
			}
			q := h.pts[i]
			for nf := first; nf < len(h.faces); nf++ {
				if h.dist(&h.faces[nf], q) > h.eps {
					h.faces[nf].outside = append(h.faces[nf].outside, i)
					break
				}
			}
		}
		h.faces[vf].outside = nil
		h.faces[vf].alive = false
	}
	return nil
}

// visitFace marks f visible and walks its edges in order: an edge to an
// invisible face is a horizon edge; an edge to an unvisited visible face
// continues the walk there. Starting each neighbour's walk at the edge
// after the one it was entered by keeps the horizon in ring order.
// Implemented with an explicit stack (face, next edge to look at).
func (h *quickhull) visitFace(f int, p r3.Vec) {
	type frame struct{ f, k, start int }
	st := []frame{{f, 0, 0}}
	h.faces[f].mark = h.mark
	h.visible = append(h.visible, f)
	for len(st) > 0 {
		top := &st[len(st)-1]
		if top.k == 3 {
			st = st[:len(st)-1]
			continue
		}
		e := (top.start + top.k) % 3
		top.k++
		face := &h.faces[top.f]
		g := face.adj[e]
		if h.faces[g].mark == h.mark {
			continue // visible and already visited
		}
		if h.dist(&h.faces[g], p) > h.eps {
			h.faces[g].mark = h.mark
			h.visible = append(h.visible, g)
			// Enter g after the edge shared with top.f.
			gs := 0
			for j := 0; j < 3; j++ {
				if h.faces[g].adj[j] == top.f {
					gs = j + 1
				}
			}
			st = append(st, frame{g, 0, gs})
			continue
		}
		h.horizon = append(h.horizon, [3]int{face.v[e], face.v[(e+1)%3], g})
	}
}

func (h *quickhull) mesh() (*mesh.Mesh, []int, error) {
	remap := map[int]uint32{}
	out := &mesh.Mesh{}
	var src []int
	for _, f := range h.faces {
		if !f.alive {
			continue
		}
		var face mesh.Face
		for k, v := range f.v {
			id, ok := remap[v]
			if !ok {
				id = uint32(len(out.Vertices))
				remap[v] = id
				out.Vertices = append(out.Vertices, h.pts[v])
				src = append(src, v)
			}
			face[k] = id
		}
		out.Faces = append(out.Faces, face)
	}
	return out, src, nil
}
