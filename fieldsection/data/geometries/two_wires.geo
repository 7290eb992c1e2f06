// Two parallel round wires of radius wire_radius, centres spacing apart, in a circle of radius
// space_radius whose outer rim is left free for the case's outer boundary kind ("open" for
// unbounded space, "grounded" for a shield). Lengths in mm.
DefineConstant[ wire_radius = 1, spacing = 10, space_radius = 20, lc_wire = 0.15, lc_far = 2 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, space_radius};
Disk(2) = {-spacing / 2, 0, 0, wire_radius};
Disk(3) = {spacing / 2, 0, 0, wire_radius};
BooleanDifference(4) = { Surface{1}; Delete; }{ Surface{2, 3}; Delete; };
Physical Surface("air") = {4};
e = 1e-6;
Physical Curve("wire_a") = Curve In BoundingBox{-spacing / 2 - wire_radius - e, -wire_radius - e, -e,
                                                -spacing / 2 + wire_radius + e, wire_radius + e, e};
Physical Curve("wire_b") = Curve In BoundingBox{spacing / 2 - wire_radius - e, -wire_radius - e, -e,
                                                spacing / 2 + wire_radius + e, wire_radius + e, e};
MeshSize{ PointsOf{ Surface{4}; } } = lc_far;
MeshSize{ PointsOf{ Curve{2, 3}; } } = lc_wire;
