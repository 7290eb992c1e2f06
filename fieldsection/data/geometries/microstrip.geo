// Microstrip: a strip of zero thickness and width strip_width on a substrate of thickness
// substrate over a ground plane (curve "ground", the bottom of the box). The box, box_half_width
// to each side and box_height above the ground, stands for unbounded space: its walls are left
// free for the case (grounded or insulated); at 100 substrate thicknesses its effect on C is ~1e-4.
// Lengths in mm. The mesh is graded towards the strip, whose edges are field singularities.
DefineConstant[ strip_width = 3, substrate = 1.6, box_half_width = 160, box_height = 160,
                lc_edge = 0.0005, lc_strip = 0.1, lc_far = 20 ];
SetFactory("OpenCASCADE");
Rectangle(1) = {-box_half_width, 0, 0, 2 * box_half_width, substrate};
Rectangle(2) = {-box_half_width, substrate, 0, 2 * box_half_width, box_height - substrate};
Point(100) = {-strip_width / 2, substrate, 0};
Point(101) = {strip_width / 2, substrate, 0};
Line(100) = {100, 101};
BooleanFragments{ Surface{1, 2}; Delete; }{ Curve{100}; Delete; }
e = 1e-6;
Physical Surface("substrate") = Surface In BoundingBox{-box_half_width - e, -e, -e, box_half_width + e, substrate + e, e};
Physical Surface("air") = Surface In BoundingBox{-box_half_width - e, substrate - e, -e, box_half_width + e, box_height + e, e};
strip() = Curve In BoundingBox{-strip_width / 2 - e, substrate - e, -e, strip_width / 2 + e, substrate + e, e};
Physical Curve("strip") = {strip()};
Physical Curve("ground") = Curve In BoundingBox{-box_half_width - e, -e, -e, box_half_width + e, e, e};
edges() = Point In BoundingBox{-strip_width / 2 - e, substrate - e, -e, -strip_width / 2 + e, substrate + e, e};
edges() += Point In BoundingBox{strip_width / 2 - e, substrate - e, -e, strip_width / 2 + e, substrate + e, e};
Field[1] = Distance;
Field[1].PointsList = {edges()};
Field[2] = Threshold;
Field[2].InField = 1;
Field[2].SizeMin = lc_edge;
Field[2].SizeMax = lc_far;
Field[2].DistMin = lc_edge;
Field[2].DistMax = 0.5;
Field[3] = Distance;
Field[3].CurvesList = {strip()};
Field[3].Sampling = 100;
Field[4] = Threshold;
Field[4].InField = 3;
Field[4].SizeMin = lc_strip;
Field[4].SizeMax = lc_far;
Field[4].DistMin = substrate;
Field[4].DistMax = box_height / 2;
Field[5] = Min;
Field[5].FieldsList = {2, 4};
Background Field = 5;
Mesh.MeshSizeExtendFromBoundary = 0;
Mesh.MeshSizeFromPoints = 0;
