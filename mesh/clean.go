package mesh

import (
	"math"

	"gonum.org/v1/gonum/spatial/r3"
)

// Clean-up changes the mesh in place: each operation is a method that
// rewrites its receiver's slices (gonum's habit: methods when the
// receiver changes) and returns counts of what it removed, so that a
// caller can report them. Clone first to keep the original. Like the
// metrics, these methods assume m.Validate() == nil.

// WeldVertices merges vertices that lie within tol of each other and
// returns how many vertices it removed.
//
// Clustering is greedy in index order: each vertex that no earlier
// vertex has claimed claims every still unclaimed vertex within tol of
// it (distance ≤ tol, found with a KDTree). So every merged vertex lies
// within tol of its cluster's first vertex, and chains of vertices each
// within tol of the next are not merged end to end. A cluster becomes
// one vertex at the mean of its positions, with the mean of its normals
// (normalised; the zero vector if they cancel) and the mean of its
// colours (per channel, rounded). The kept vertices stay in the order of
// their first members, and faces are re-indexed.
//
// Faces whose corners merge get a repeated index; RemoveDegenerateFaces
// removes them. tol = 0 merges exact duplicates only; a negative or NaN
// tol merges nothing. Vertices with a NaN or infinite coordinate are
// never merged.
func (m *Mesh) WeldVertices(tol float64) int {
	n := len(m.Vertices)
	if !(tol >= 0) || n < 2 {
		return 0
	}
	tree := NewKDTree(m.Vertices)
	const unclaimed = -1
	newIndex := make([]int32, n) // old vertex → kept vertex
	for i := range newIndex {
		newIndex[i] = unclaimed
	}
	// Accumulate sums per kept vertex.
	var (
		pos    []r3.Vec
		nrm    []r3.Vec
		col    [][3]uint32
		count  []uint32
		first  []int32 // first member of each cluster
		nearby []int
	)
	for i, v := range m.Vertices {
		if newIndex[i] != unclaimed {
			continue
		}
		k := int32(len(pos))
		first = append(first, int32(i))
		pos = append(pos, r3.Vec{})
		count = append(count, 0)
		if m.Normals != nil {
			nrm = append(nrm, r3.Vec{})
		}
		if m.Colors != nil {
			col = append(col, [3]uint32{})
		}
		claim := func(j int) {
			newIndex[j] = k
			// Sum offsets from the first member, so that exact duplicates
			// keep their position bit for bit.
			pos[k] = r3.Add(pos[k], r3.Sub(m.Vertices[j], v))
			count[k]++
			if m.Normals != nil {
				nrm[k] = r3.Add(nrm[k], m.Normals[j])
			}
			if m.Colors != nil {
				c := m.Colors[j]
				col[k][0] += uint32(c.R)
				col[k][1] += uint32(c.G)
				col[k][2] += uint32(c.B)
			}
		}
		if !isFinite(v) {
			// Alone; its offset from itself would be NaN.
			newIndex[i] = k
			count[k] = 1
			if m.Normals != nil {
				nrm[k] = m.Normals[i]
			}
			if m.Colors != nil {
				c := m.Colors[i]
				col[k] = [3]uint32{uint32(c.R), uint32(c.G), uint32(c.B)}
			}
			continue
		}
		// Radius lists indices in ascending order, so the sums are
		// formed in a fixed order and the result is deterministic.
		nearby = tree.Radius(v, tol, nearby)
		for _, j := range nearby {
			if newIndex[j] == unclaimed {
				claim(j)
			}
		}
	}
	kept := len(pos)
	if kept == n {
		return 0 // nothing merged; leave the data untouched bit for bit
	}
	for k := range pos {
		c := float64(count[k])
		pos[k] = r3.Add(m.Vertices[first[k]], r3.Scale(1/c, pos[k]))
		if nrm != nil {
			nrm[k] = Normalize(nrm[k])
		}
	}
	var colors []RGB
	if m.Colors != nil {
		colors = make([]RGB, kept)
		for k, s := range col {
			c := count[k]
			// Round to nearest: (sum + c/2) / c.
			colors[k] = RGB{uint8((s[0] + c/2) / c), uint8((s[1] + c/2) / c), uint8((s[2] + c/2) / c)}
		}
	}
	m.Vertices, m.Normals, m.Colors = pos, nrm, colors
	for i, f := range m.Faces {
		m.Faces[i] = Face{uint32(newIndex[f[0]]), uint32(newIndex[f[1]]), uint32(newIndex[f[2]])}
	}
	return n - kept
}

// RemoveDegenerateFaces removes the faces that repeat a vertex index or
// whose area is not larger than minArea (so minArea = 0 removes exactly
// the zero-area faces; a face with a non-finite vertex has a NaN area
// and is removed too; a NaN minArea counts as 0). It returns the number
// of faces removed and keeps the order of the others.
func (m *Mesh) RemoveDegenerateFaces(minArea float64) int {
	if math.IsNaN(minArea) {
		minArea = 0
	}
	return m.filterFaces(func(i int, f Face) bool {
		return !degenerateIndex(f) && 0.5*r3.Norm(m.faceCross(f)) > minArea
	})
}

// filterFaces keeps the faces for which keep is true, in order, and
// returns how many it dropped.
func (m *Mesh) filterFaces(keep func(i int, f Face) bool) int {
	out := m.Faces[:0]
	for i, f := range m.Faces {
		if keep(i, f) {
			out = append(out, f)
		}
	}
	removed := len(m.Faces) - len(out)
	clear(m.Faces[len(out):])
	m.Faces = out
	return removed
}

// RemoveSmallComponents removes every connected component (see
// Components) of fewer than minFaces faces and returns the numbers of
// components and faces removed. The vertices stay; remove them with
// RemoveUnreferencedVertices.
func (m *Mesh) RemoveSmallComponents(minFaces int) (components, faces int) {
	labels, count := m.Components()
	size := make([]int, count)
	for _, l := range labels {
		size[l]++
	}
	for _, s := range size {
		if s < minFaces {
			components++
		}
	}
	faces = m.filterFaces(func(i int, _ Face) bool { return size[labels[i]] >= minFaces })
	return components, faces
}

// KeepLargestComponent keeps only the connected component of largest
// surface area (on a tie, the one whose first face comes first) and
// returns the numbers of components and faces removed. Area, not face
// count, decides, so a finely tessellated fragment cannot outrank the
// part. The vertices stay; remove them with RemoveUnreferencedVertices.
func (m *Mesh) KeepLargestComponent() (components, faces int) {
	labels, count := m.Components()
	if count <= 1 {
		return 0, 0
	}
	area := make([]float64, count)
	for i, f := range m.Faces {
		if !degenerateIndex(f) {
			area[labels[i]] += 0.5 * r3.Norm(m.faceCross(f))
		}
	}
	best := 0
	for l, a := range area {
		// A NaN area (non-finite vertices) never wins.
		if a > area[best] || (math.IsNaN(area[best]) && !math.IsNaN(a)) {
			best = l
		}
	}
	faces = m.filterFaces(func(i int, _ Face) bool { return labels[i] == best })
	return count - 1, faces
}

// RemoveUnreferencedVertices removes the vertices that no face uses,
// with their normals and colours, re-indexes the faces, and returns the
// number removed. The kept vertices stay in order.
func (m *Mesh) RemoveUnreferencedVertices() int {
	n := len(m.Vertices)
	used := make([]bool, n)
	for _, f := range m.Faces {
		used[f[0]], used[f[1]], used[f[2]] = true, true, true
	}
	newIndex := make([]uint32, n)
	kept := 0
	for i, u := range used {
		if !u {
			continue
		}
		newIndex[i] = uint32(kept)
		m.Vertices[kept] = m.Vertices[i]
		if m.Normals != nil {
			m.Normals[kept] = m.Normals[i]
		}
		if m.Colors != nil {
			m.Colors[kept] = m.Colors[i]
		}
		kept++
	}
	if kept == n {
		return 0
	}
	m.Vertices = m.Vertices[:kept:kept]
	if m.Normals != nil {
		m.Normals = m.Normals[:kept:kept]
	}
	if m.Colors != nil {
		m.Colors = m.Colors[:kept:kept]
	}
	for i, f := range m.Faces {
		m.Faces[i] = Face{newIndex[f[0]], newIndex[f[1]], newIndex[f[2]]}
	}
	return n - kept
}

// CleanOptions selects the steps of Mesh.Clean.
type CleanOptions struct {
	// WeldTolerance is the distance in metres within which vertices are
	// merged (see WeldVertices); negative skips welding.
	// DEFAULT: 1e-6 (1 µm: merges the duplicated corners that a
	// per-triangle file format such as STL or a float32 round trip
	// leaves, far below any scanner's resolution)
	WeldTolerance float64
	// MinFaceArea: faces of this area or less, in square metres, are
	// removed with the repeated-index faces (see RemoveDegenerateFaces).
	// DEFAULT: 0 (only zero-area faces)
	MinFaceArea float64
	// MinComponentFaces: connected components with fewer faces are
	// removed. DEFAULT: 0 (keep all)
	MinComponentFaces int
	// KeepLargestOnly keeps only the component of largest area.
	// DEFAULT: false
	KeepLargestOnly bool
}

// DefaultCleanOptions returns the defaults documented on CleanOptions.
func DefaultCleanOptions() CleanOptions {
	return CleanOptions{WeldTolerance: 1e-6}
}

// CleanStats counts what Mesh.Clean removed.
type CleanStats struct {
	WeldedVertices       int // vertices merged into others
	DegenerateFaces      int // faces with a repeated index or too small an area
	RemovedComponents    int // components dropped as too small or not the largest
	ComponentFaces       int // faces in those components
	UnreferencedVertices int // vertices left without a face and removed
}

// Clean runs, in this order, WeldVertices, RemoveDegenerateFaces,
// RemoveSmallComponents, KeepLargestComponent (each as opt selects) and
// RemoveUnreferencedVertices, and returns what each removed.
func (m *Mesh) Clean(opt CleanOptions) CleanStats {
	var s CleanStats
	if opt.WeldTolerance >= 0 {
		s.WeldedVertices = m.WeldVertices(opt.WeldTolerance)
	}
	s.DegenerateFaces = m.RemoveDegenerateFaces(opt.MinFaceArea)
	if opt.MinComponentFaces > 0 {
		c, f := m.RemoveSmallComponents(opt.MinComponentFaces)
		s.RemovedComponents += c
		s.ComponentFaces += f
	}
	if opt.KeepLargestOnly {
		c, f := m.KeepLargestComponent()
		s.RemovedComponents += c
		s.ComponentFaces += f
	}
	s.UnreferencedVertices = m.RemoveUnreferencedVertices()
	return s
}
