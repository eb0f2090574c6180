package sim

import "math"

// Pose is a rigid transform: a rotation R followed by a translation P. Applied
// to a point p given in the child frame it yields R·p + P in the parent frame.
// It maps child-frame coordinates to parent-frame coordinates, so a chain of
// poses composes left to right: world←a, a←b gives world←b = (world←a)·(a←b).
//
// The zero Pose is not a valid transform (its rotation is all zeros); start
// from Identity or PoseFromXYZRPY.
type Pose struct {
	R [9]float64 // rotation, row-major 3×3: R[3*row+col]
	P [3]float64 // translation, m
}

// Identity returns the pose that maps every point to itself.
func Identity() Pose {
	return Pose{R: [9]float64{1, 0, 0, 0, 1, 0, 0, 0, 1}}
}

// RPY returns the rotation matrix of URDF's fixed-axis roll, pitch and yaw
// (rad): first roll about the fixed x axis, then pitch about the fixed y axis,
// then yaw about the fixed z axis, so R = Rz(yaw)·Ry(pitch)·Rx(roll).
func RPY(roll, pitch, yaw float64) [9]float64 {
	sr, cr := math.Sincos(roll)
	sp, cp := math.Sincos(pitch)
	sy, cy := math.Sincos(yaw)
	return [9]float64{
		cy * cp, cy*sp*sr - sy*cr, cy*sp*cr + sy*sr,
		sy * cp, sy*sp*sr + cy*cr, sy*sp*cr - cy*sr,
		-sp, cp * sr, cp * cr,
	}
}

// PoseFromXYZRPY returns the pose written in a URDF <origin xyz="…" rpy="…"/>:
// translation xyz (m) and rotation RPY(rpy[0], rpy[1], rpy[2]) (rad).
func PoseFromXYZRPY(xyz, rpy [3]float64) Pose {
	return Pose{R: RPY(rpy[0], rpy[1], rpy[2]), P: xyz}
}

// AxisAngle returns the rotation by angle (rad, right-handed) about the unit
// vector axis (Rodrigues' formula R = cos θ·I + sin θ·[a]× + (1−cos θ)·a·aᵀ).
// axis must already be of unit length; AxisAngle does not normalise it.
func AxisAngle(axis [3]float64, angle float64) [9]float64 {
	s, c := math.Sincos(angle)
	t := 1 - c
	x, y, z := axis[0], axis[1], axis[2]
	return [9]float64{
		c + t*x*x, t*x*y - s*z, t*x*z + s*y,
		t*x*y + s*z, c + t*y*y, t*y*z - s*x,
		t*x*z - s*y, t*y*z + s*x, c + t*z*z,
	}
}

// Mul returns the composition a·b: first b, then a. If a maps frame B to
// frame A and b maps frame C to frame B, a.Mul(b) maps C to A.
func (a Pose) Mul(b Pose) Pose {
	var out Pose
	out.R = rotMul(&a.R, &b.R)
	out.P = a.Apply(b.P)
	return out
}

// Apply maps the point p (child frame) into the parent frame: R·p + P.
func (a Pose) Apply(p [3]float64) [3]float64 {
	v := rotApply(&a.R, p)
	return [3]float64{v[0] + a.P[0], v[1] + a.P[1], v[2] + a.P[2]}
}

// Rotate maps the direction v (child frame) into the parent frame: R·v.
// Unlike Apply it ignores the translation.
func (a Pose) Rotate(v [3]float64) [3]float64 {
	return rotApply(&a.R, v)
}

// Inverse returns the pose that undoes a: Rᵀ, −Rᵀ·P. It assumes R is a
// rotation (orthonormal), as every Pose built by this package is.
func (a Pose) Inverse() Pose {
	var out Pose
	r := &a.R
	out.R = [9]float64{
		r[0], r[3], r[6],
		r[1], r[4], r[7],
		r[2], r[5], r[8],
	}
	v := rotApply(&out.R, a.P)
	out.P = [3]float64{-v[0], -v[1], -v[2]}
	return out
}

// poseMulTo sets dst = a·b. dst may alias neither a nor b.
func poseMulTo(dst, a, b *Pose) {
	dst.R = rotMul(&a.R, &b.R)
	v := rotApply(&a.R, b.P)
	dst.P = [3]float64{v[0] + a.P[0], v[1] + a.P[1], v[2] + a.P[2]}
}

// rotMul returns the 3×3 product a·b of two row-major matrices.
func rotMul(a, b *[9]float64) [9]float64 {
	var out [9]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			out[3*i+j] = a[3*i]*b[j] + a[3*i+1]*b[3+j] + a[3*i+2]*b[6+j]
		}
	}
	return out
}

// rotApply returns r·v for a row-major 3×3 matrix r.
func rotApply(r *[9]float64, v [3]float64) [3]float64 {
	return [3]float64{
		r[0]*v[0] + r[1]*v[1] + r[2]*v[2],
		r[3]*v[0] + r[4]*v[1] + r[5]*v[2],
		r[6]*v[0] + r[7]*v[1] + r[8]*v[2],
	}
}

// kinCross returns a×b.
func kinCross(a, b [3]float64) [3]float64 {
	return [3]float64{
		a[1]*b[2] - a[2]*b[1],
		a[2]*b[0] - a[0]*b[2],
		a[0]*b[1] - a[1]*b[0],
	}
}
