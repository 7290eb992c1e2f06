// Benchmark model: a grounded 100 x 60 mm box of air, a 60 x 10 mm insulating block in it, and
// four 10 x 2 mm bars (holes) inside the block; uniform mesh size h. Lengths in mm.
DefineConstant[ h = 1 ];
SetFactory("OpenCASCADE");
Rectangle(1) = {-50, -30, 0, 100, 60};
Rectangle(2) = {-30, -5, 0, 60, 10};
Rectangle(3) = {-26, -1, 0, 10, 2};
Rectangle(4) = {-12, -1, 0, 10, 2};
Rectangle(5) = {2, -1, 0, 10, 2};
Rectangle(6) = {16, -1, 0, 10, 2};
BooleanDifference{ Surface{1, 2}; Delete; }{ Surface{3, 4, 5, 6}; Delete; }
BooleanFragments{ Surface{:}; Delete; }{}
e = 1e-4;
Physical Surface("block") = Surface In BoundingBox{-30 - e, -5 - e, -e, 30 + e, 5 + e, e};
air() = Surface{:};
air() -= Surface In BoundingBox{-30 - e, -5 - e, -e, 30 + e, 5 + e, e};
Physical Surface("air") = {air()};
Physical Curve("bar_1") = Curve In BoundingBox{-26 - e, -1 - e, -e, -16 + e, 1 + e, e};
Physical Curve("bar_2") = Curve In BoundingBox{-12 - e, -1 - e, -e, -2 + e, 1 + e, e};
Physical Curve("bar_3") = Curve In BoundingBox{2 - e, -1 - e, -e, 12 + e, 1 + e, e};
Physical Curve("bar_4") = Curve In BoundingBox{16 - e, -1 - e, -e, 26 + e, 1 + e, e};
MeshSize{ PointsOf{ Surface{:}; } } = h;
