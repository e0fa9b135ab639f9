//! Small `[f64; 3]` helpers (no allocation, `libm` for every root).

pub type V3 = [f64; 3];

#[inline]
pub fn add(a: V3, b: V3) -> V3 {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}
#[inline]
pub fn sub(a: V3, b: V3) -> V3 {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
#[inline]
pub fn scale(a: V3, k: f64) -> V3 {
    [a[0] * k, a[1] * k, a[2] * k]
}
#[inline]
pub fn axpy(a: V3, k: f64, b: V3) -> V3 {
    [a[0] + k * b[0], a[1] + k * b[1], a[2] + k * b[2]]
}
#[inline]
pub fn dot(a: V3, b: V3) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
#[inline]
pub fn cross(a: V3, b: V3) -> V3 {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}
#[inline]
pub fn norm(a: V3) -> f64 {
    libm::sqrt(dot(a, a))
}
#[inline]
pub fn dist(a: V3, b: V3) -> f64 {
    norm(sub(a, b))
}
/// Unit vector along `a`, or `None` when `a` is (nearly) zero.
#[inline]
pub fn unit(a: V3) -> Option<V3> {
    let n = norm(a);
    if n > 1e-300 && n.is_finite() {
        Some(scale(a, 1.0 / n))
    } else {
        None
    }
}
/// Any unit vector perpendicular to the unit vector `a`.
pub fn perpendicular(a: V3) -> V3 {
    let pick = if a[0].abs() < 0.9 {
        [1.0, 0.0, 0.0]
    } else {
        [0.0, 1.0, 0.0]
    };
    unit(cross(a, pick)).unwrap_or([0.0, 0.0, 1.0])
}
/// `a` with its component along the unit vector `t` removed.
#[inline]
pub fn reject(a: V3, t: V3) -> V3 {
    axpy(a, -dot(a, t), t)
}
