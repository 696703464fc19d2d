// Package mesh holds scanfold's geometry: triangle meshes, oriented
// coloured point clouds, rigid poses and pinhole cameras, with the file
// formats (PLY, STL, OBJ), metrics, clean-up, spatial search, rigid
// alignment and isosurface extraction that the later pipeline stages
// (reconstruct, features, validate) build on.
//
// # Units and frames
//
// Lengths are metres and angles radians everywhere inside the package.
// A Pose maps points of one frame into another, x ↦ R·x + T; every
// variable that holds one says which way it maps (CamToWorld,
// ModelToCam). Camera frames follow the pinhole convention of
// Intrinsics: x right, y down, z forward along the optical axis.
//
// # Invariants
//
//   - A Mesh's Normals and Colors are either nil or exactly as long as
//     Vertices; every Face indexes Vertices (Mesh.Validate checks this).
//   - A Cloud's Normals and Colors are either nil or exactly as long as
//     Points.
//   - A Pose's R is a proper rotation (orthonormal, determinant +1) up
//     to floating-point rounding; constructors guarantee it and
//     Pose.Orthonormalize restores it after long chains of products.
//
// # Degenerate input
//
// Decided once, here: a zero-length vector normalises to the zero
// vector (never NaN); an empty mesh or cloud has zero area, volume and
// diameter and an empty bounding box (Box.Empty reports it); faces with
// a repeated vertex index or zero area contribute nothing to metrics and
// are removed by clean-up. The topology queries (edges, watertightness,
// orientation, Euler characteristic) skip faces with a repeated index
// but keep zero-area faces with three distinct indices, which still
// close a surface combinatorially. Bounding boxes, diameters and the
// k-d tree ignore points with a NaN or infinite coordinate. Functions
// that cannot give a meaningful answer for degenerate input (fewer than
// three non-collinear points for an alignment, say) return an error
// wrapping ErrDegenerate.
// Isosurface extraction treats a NaN or infinite lattice value as
// unknown (the cells around it are skipped, which can open the
// surface), counts a value equal to the iso level as outside (which can
// leave zero-area triangles there, kept so the mesh stays closed), and
// returns an empty mesh when nothing crosses the level.
//
// # Files
//
// ReadPLY, ReadSTL and ReadOBJ (and LoadMesh, which picks one by the
// file's extension) hold the whole file in memory, at most MaxFileBytes,
// and check every count a header declares against the bytes that follow
// before they allocate. Bad data gives a *FileError naming the element,
// record, property and line or byte offset, wrapping ErrInvalid or
// ErrUnsupported (and io.ErrUnexpectedEOF when the file is cut short).
// The readers never return a NaN or infinite position. An empty PLY
// vertex element reads as an empty mesh; an STL solid without triangles
// and an OBJ file without vertices are refused, by reader and writer
// alike. Binary PLY and STL store float32, so a round trip through them
// is exact to float32 rounding. SaveMesh and SaveCloud replace a file
// atomically: a crash or an error never leaves half of one.
//
// Programmer errors (mismatched slice lengths passed to a function that
// documents them) panic; anything that comes from data returns an error.
package mesh
