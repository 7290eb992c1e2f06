// A round wire of radius wire_radius, centre at height above a flat ground plane (the line
// y = 0, curve "ground"), in the half-disc of radius space_radius whose arc is left free for the
// case's outer boundary kind ("open" continues the half-space to infinity). Lengths in mm.
DefineConstant[ wire_radius = 1, height = 5, space_radius = 20, lc_wire = 0.15, lc_far = 2 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, space_radius};
Rectangle(2) = {-space_radius, -space_radius, 0, 2 * space_radius, space_radius};
Disk(3) = {0, height, 0, wire_radius};
BooleanDifference(4) = { Surface{1}; Delete; }{ Surface{2, 3}; Delete; };
Physical Surface("air") = {4};
e = 1e-6;
Physical Curve("ground") = Curve In BoundingBox{-space_radius - e, -e, -e, space_radius + e, e, e};
wire() = Curve In BoundingBox{-wire_radius - e, height - wire_radius - e, -e,
                              wire_radius + e, height + wire_radius + e, e};
Physical Curve("wire") = {wire()};
MeshSize{ PointsOf{ Surface{4}; } } = lc_far;
MeshSize{ PointsOf{ Curve{wire()}; } } = lc_wire;
