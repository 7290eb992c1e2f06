// Upper half of the two-wire line of two_wires.geo, cut along the line through both wire
// centres (curve "symmetry", to be insulated: zero normal D by mirror symmetry). Lengths in mm.
DefineConstant[ wire_radius = 1, spacing = 10, space_radius = 20, lc_wire = 0.15, lc_far = 2 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, space_radius};
Rectangle(2) = {-space_radius, -space_radius, 0, 2 * space_radius, space_radius};
Disk(3) = {-spacing / 2, 0, 0, wire_radius};
Disk(4) = {spacing / 2, 0, 0, wire_radius};
BooleanDifference(5) = { Surface{1}; Delete; }{ Surface{2, 3, 4}; Delete; };
Physical Surface("air") = {5};
e = 1e-6;
Physical Curve("symmetry") = Curve In BoundingBox{-space_radius - e, -e, -e, space_radius + e, e, e};
wire_a() = Curve In BoundingBox{-spacing / 2 - wire_radius - e, -e, -e,
                                -spacing / 2 + wire_radius + e, wire_radius + e, e};
wire_b() = Curve In BoundingBox{spacing / 2 - wire_radius - e, -e, -e,
                                spacing / 2 + wire_radius + e, wire_radius + e, e};
Physical Curve("wire_a") = {wire_a()};
Physical Curve("wire_b") = {wire_b()};
MeshSize{ PointsOf{ Surface{5}; } } = lc_far;
MeshSize{ PointsOf{ Curve{wire_a(), wire_b()}; } } = lc_wire;
