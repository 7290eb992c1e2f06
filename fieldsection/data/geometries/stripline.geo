// Symmetric stripline: a strip of zero thickness and width strip_width centred between two ground
// planes spacing apart, in one dielectric; side walls wall_distance beyond the strip's edges are
// left free (insulated in the case: the fringing field decays like exp(-pi x / spacing)).
// Lengths in mm. The mesh is graded towards the strip's edges, where the field is singular.
DefineConstant[ strip_width = 1, spacing = 2, wall_distance = 6, lc = 0.2, lc_edge = 0.0005, dist_max = 0.5 ];
SetFactory("OpenCASCADE");
half = strip_width / 2 + wall_distance;
Rectangle(1) = {-half, -spacing / 2, 0, 2 * half, spacing};
Point(100) = {-strip_width / 2, 0, 0};
Point(101) = {strip_width / 2, 0, 0};
Line(100) = {100, 101};
BooleanFragments{ Surface{1}; Delete; }{ Curve{100}; Delete; }
e = 1e-6;
Physical Surface("dielectric") = Surface{:};
Physical Curve("strip") = Curve In BoundingBox{-strip_width / 2 - e, -e, -e, strip_width / 2 + e, e, e};
Physical Curve("ground") = Curve In BoundingBox{-half - e, spacing / 2 - e, -e, half + e, spacing / 2 + e, e};
ground_bottom() = Curve In BoundingBox{-half - e, -spacing / 2 - e, -e, half + e, -spacing / 2 + e, e};
Physical Curve("ground") += {ground_bottom()};
edges() = Point In BoundingBox{-strip_width / 2 - e, -e, -e, -strip_width / 2 + e, e, e};
edges() += Point In BoundingBox{strip_width / 2 - e, -e, -e, strip_width / 2 + e, e, e};
Field[1] = Distance;
Field[1].PointsList = {edges()};
Field[2] = Threshold;
Field[2].InField = 1;
Field[2].SizeMin = lc_edge;
Field[2].SizeMax = lc;
Field[2].DistMin = lc_edge;
Field[2].DistMax = dist_max;
Background Field = 2;
Mesh.MeshSizeExtendFromBoundary = 0;
Mesh.MeshSizeFromPoints = 0;
