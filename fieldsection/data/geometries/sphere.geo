// A metal sphere of radius sphere_radius (a hole whose rim is the curve "sphere"), in the r-z
// half-plane of an axisymmetric model (x is the radius, the axis of revolution is x = 0),
// surrounded by a half-disc of radius space_radius whose arc is left free (open space, or an outer
// sphere as the curve "shell" when shell = 1). Lengths in mm.
DefineConstant[ sphere_radius = 1, space_radius = 3, lc = 0.1, shell = 0 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, space_radius};
Rectangle(2) = {-space_radius, -space_radius, 0, space_radius, 2 * space_radius};
Disk(3) = {0, 0, 0, sphere_radius};
BooleanDifference(4) = { Surface{1}; Delete; }{ Surface{2, 3}; Delete; };
Physical Surface("gas") = {4};
e = 1e-6;
inner() = Curve In BoundingBox{-e, -sphere_radius - e, -e, sphere_radius + e, sphere_radius + e, e};
axis() = Curve In BoundingBox{-e, -space_radius - e, -e, e, space_radius + e, e};
inner() -= {axis()};
Physical Curve("sphere") = {inner()};
If (shell)
  outer() = Curve In BoundingBox{-e, -space_radius - e, -e, space_radius + e, space_radius + e, e};
  outer() -= {inner(), axis()};
  Physical Curve("shell") = {outer()};
EndIf
MeshSize{ PointsOf{ Surface{4}; } } = lc;
