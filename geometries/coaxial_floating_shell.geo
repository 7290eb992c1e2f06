// Coaxial line with a thin metal shell between the conductors (a floating grading foil or a
// screen whose potential nobody fixes). Inner conductor r_inner and the shell r_shell_in..r_shell_out
// are holes; their rims are the curves "inner" and "shell". Lengths in mm.
DefineConstant[ r_inner = 1, r_shell_in = 1.8, r_shell_out = 1.9, r_outer = 3, lc = 0.1 ];
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, r_outer};
Disk(2) = {0, 0, 0, r_shell_out};
Disk(3) = {0, 0, 0, r_shell_in};
Disk(4) = {0, 0, 0, r_inner};
BooleanDifference(5) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
BooleanDifference(6) = { Surface{3}; Delete; }{ Surface{4}; Delete; };
Physical Surface("outer_gap") = {5};
Physical Surface("inner_gap") = {6};
e = 1e-6;
Physical Curve("inner") = Curve In BoundingBox{-r_inner - e, -r_inner - e, -e, r_inner + e, r_inner + e, e};
shell() = Curve In BoundingBox{-r_shell_out - e, -r_shell_out - e, -e, r_shell_out + e, r_shell_out + e, e};
shell() -= Curve In BoundingBox{-r_inner - e, -r_inner - e, -e, r_inner + e, r_inner + e, e};
Physical Curve("shell") = {shell()};
outer() = Curve In BoundingBox{-r_outer - e, -r_outer - e, -e, r_outer + e, r_outer + e, e};
outer() -= Curve In BoundingBox{-r_shell_out - e, -r_shell_out - e, -e, r_shell_out + e, r_shell_out + e, e};
Physical Curve("outer") = {outer()};
MeshSize{ PointsOf{ Surface{:}; } } = lc;
