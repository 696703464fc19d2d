// Package render draws synthetic RGB-D frames of triangle meshes through
// a pinhole camera, and degrades them with a published model of
// structured-light depth-sensor noise.
//
// # Overview
//
// A Renderer draws a list of Objects (a mesh, its ModelToCam pose and a
// fallback colour) into a Frame: an 8-bit colour image with simple
// lighting, a depth map, a normal map and, per pixel, the index of the
// object and of the mesh face that is seen. The fauxgl software
// rasteriser (github.com/fogleman/fauxgl) decides visibility only: each
// face is drawn with a colour that encodes its identity. For every
// covered pixel the exact pinhole ray through the pixel centre is then
// intersected with the visible face (Möller & Trumbore 1997, "Fast,
// minimum storage ray-triangle intersection", Journal of Graphics Tools
// 2(1), DOI 10.1080/10867651.1997.10487468), which gives depth,
// barycentric coordinates, the interpolated vertex colour and normal.
// Depth is therefore exact to the pinhole model up to floating-point
// rounding, not to the precision of a depth buffer.
//
// Sensor (noise.go) adds the axial and lateral depth noise of Nguyen,
// Izadi & Lovell (2012, 3DIMPVT, DOI 10.1109/3DIMPVT.2012.84), dropouts
// at grazing angles, along depth discontinuities and at random, range
// limits, optional disparity quantisation, and colour noise. The PNG
// helpers (png.go) read and write 16-bit depth and 8-bit colour images.
//
// # Frames and units
//
// Everything is in the camera frame of mesh.Intrinsics: x right, y down,
// z forward along the optical axis, metres and radians. The centre of
// pixel (i, j) (column i, row j) is at (u, v) = (i, j). Depth is the z
// coordinate of the surface point (not the distance along the ray).
// Images are row-major: pixel (i, j) is element j·Width + i of every
// per-pixel slice, and Normal holds three float32 per pixel.
//
// # Invariants
//
//   - A pixel either sees a surface (Depth > 0, Object ≥ 0, Triangle ≥ 0,
//     a unit Normal with Normal·ray < 0, i.e. facing the camera) or it
//     does not (Depth = 0, Object = Triangle = −1, Normal = 0, Color =
//     Options.Background).
//   - Only surface points with Near ≤ z ≤ Far are drawn; anything behind
//     the camera is never drawn.
//   - Render is deterministic: the same objects and options give the same
//     frame bit for bit. Sensor noise is deterministic for a given
//     *rand.Rand state.
//
// # Degenerate input
//
// Faces with zero area, and faces whose plane passes (within 1e−9 rad)
// through the camera centre, cover no pixel centre and are skipped. A
// mesh with no faces draws nothing. Objects with a nil mesh, a mesh that
// fails mesh.Mesh.Validate, non-finite vertices or a non-finite pose are
// errors naming the object. Back faces are drawn (a real sensor sees
// the inside of an open surface) unless Options.CullBackFaces is set;
// their normal is flipped to face the camera. Where two faces meet
// exactly at a pixel centre, either may be reported; a pixel centre that
// fauxgl's rounding drops from both faces of a shared edge is recovered
// from the faces seen at its 4-neighbours (see Renderer.RenderInto), so
// flat quads and boxes render without cracks.
package render
