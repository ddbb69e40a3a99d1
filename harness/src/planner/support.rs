//! Support polygons in the plane of the ground: convex hull of the stance feet, the polygon
//! shrunk by a margin per edge, and the point of it closest to a wish. Build-time only (these
//! allocate).

use nalgebra::Vector2;

pub(crate) type P2 = Vector2<f64>;

/// A convex polygon with counter-clockwise vertices, described by its edges as half-planes
/// n·x ≥ b with n the unit inward normal.
#[derive(Clone, Debug)]
pub(crate) struct SupportPolygon {
    pub vertices: Vec<P2>,
    /// (inward unit normal, offset b) per edge k, the edge running from vertex k to k + 1.
    pub edges: Vec<(P2, f64)>,
}

fn cross(o: &P2, a: &P2, b: &P2) -> f64 {
    (a.x - o.x) * (b.y - o.y) - (a.y - o.y) * (b.x - o.x)
}

/// Convex hull, counter-clockwise, by Andrew's monotone chain (A. M. Andrew, "Another efficient
/// algorithm for convex hulls in two dimensions", Information Processing Letters, 1979).
/// Collinear points are dropped.
pub(crate) fn convex_hull(points: &[P2]) -> Vec<P2> {
    let mut pts: Vec<P2> = points.to_vec();
    pts.sort_by(|a, b| a.x.total_cmp(&b.x).then(a.y.total_cmp(&b.y)));
    pts.dedup();
    if pts.len() < 3 {
        return pts;
    }
    let mut hull: Vec<P2> = Vec::with_capacity(2 * pts.len());
    half_hull(pts.iter(), &mut hull);
    half_hull(pts.iter().rev(), &mut hull);
    hull
}

/// One chain of the monotone-chain hull (lower for increasing x, upper for decreasing), its
/// last point left off (it starts the other chain).
fn half_hull<'a>(pts: impl Iterator<Item = &'a P2>, hull: &mut Vec<P2>) {
    let start = hull.len();
    for p in pts {
        while hull.len() >= start + 2
            && cross(&hull[hull.len() - 2], &hull[hull.len() - 1], p) <= 0.0
        {
            hull.pop();
        }
        hull.push(*p);
    }
    hull.pop();
}

impl SupportPolygon {
    /// The convex hull of `points` (needs three points not on one line).
    pub fn hull(points: &[P2]) -> Option<SupportPolygon> {
        let vertices = convex_hull(points);
        if vertices.len() < 3 {
            return None;
        }
        let n = vertices.len();
        let edges = (0..n)
            .map(|k| {
                let (a, b) = (vertices[k], vertices[(k + 1) % n]);
                let d = (b - a).normalize();
                let normal = P2::new(-d.y, d.x);
                (normal, normal.dot(&a))
            })
            .collect();
        Some(SupportPolygon { vertices, edges })
    }

    /// Signed distance of `x` inside the polygon from edge k (negative outside it).
    pub fn edge_distance(&self, k: usize, x: &P2) -> f64 {
        let (n, b) = self.edges[k];
        n.dot(x) - b
    }

    /// Smallest distance of `x` to any edge line, inside positive.
    pub fn margin_of(&self, x: &P2) -> f64 {
        (0..self.edges.len())
            .map(|k| self.edge_distance(k, x))
            .fold(f64::INFINITY, f64::min)
    }

    /// The polygon shrunk so that every point of it lies at least `inset[k]` inside edge k
    /// (Sutherland & Hodgman, "Reentrant polygon clipping", CACM 1974, one half-plane at a
    /// time). Empty when no such point exists.
    pub fn inset(&self, inset: &[f64]) -> Vec<P2> {
        let mut poly = self.vertices.clone();
        for (k, &(n, b)) in self.edges.iter().enumerate() {
            if poly.is_empty() {
                break;
            }
            let level = b + inset[k];
            let mut out = Vec::with_capacity(poly.len() + 1);
            for i in 0..poly.len() {
                let cur = poly[i];
                let next = poly[(i + 1) % poly.len()];
                let (dc, dn) = (n.dot(&cur) - level, n.dot(&next) - level);
                if dc >= 0.0 {
                    out.push(cur);
                }
                if (dc >= 0.0) != (dn >= 0.0) {
                    let s = dc / (dc - dn);
                    out.push(cur + (next - cur) * s);
                }
            }
            poly = out;
        }
        poly
    }

    /// The largest uniform margin m for which the polygon shrunk by `extra[k] + m` is not empty
    /// (bisection; for a triangle with no extra this is its inscribed radius).
    pub fn largest_margin(&self, extra: &[f64]) -> f64 {
        let mut lo = -1.0;
        let span = self
            .vertices
            .iter()
            .map(|v| (v - self.vertices[0]).norm())
            .fold(0.0, f64::max);
        let mut hi = span;
        let mut inset = vec![0.0; extra.len()];
        for _ in 0..60 {
            let mid = 0.5 * (lo + hi);
            for (i, e) in extra.iter().enumerate() {
                inset[i] = e + mid;
            }
            if self.inset(&inset).is_empty() {
                hi = mid;
            } else {
                lo = mid;
            }
        }
        lo
    }
}

/// The point of a convex polygon (counter-clockwise vertices) closest to `x`; `x` itself when
/// inside. None for an empty polygon.
pub(crate) fn closest_point(poly: &[P2], x: &P2) -> Option<P2> {
    match poly.len() {
        0 => return None,
        1 => return Some(poly[0]),
        _ => {}
    }
    let n = poly.len();
    let inside = n >= 3 && (0..n).all(|k| cross(&poly[k], &poly[(k + 1) % n], x) >= 0.0);
    if inside {
        return Some(*x);
    }
    let mut best = poly[0];
    let mut best_d = f64::INFINITY;
    for k in 0..n {
        let (a, b) = (poly[k], poly[(k + 1) % n]);
        let ab = b - a;
        let len2 = ab.norm_squared();
        let s = if len2 > 0.0 {
            ((x - a).dot(&ab) / len2).clamp(0.0, 1.0)
        } else {
            0.0
        };
        let p = a + ab * s;
        let d = (p - x).norm();
        if d < best_d {
            best_d = d;
            best = p;
        }
    }
    Some(best)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hull_inset_and_closest_point() {
        let pts = [
            P2::new(0.0, 0.0),
            P2::new(1.0, 0.0),
            P2::new(0.5, 0.2),
            P2::new(0.0, 1.0),
            P2::new(0.2, 0.2),
        ];
        let poly = SupportPolygon::hull(&pts).unwrap();
        assert_eq!(poly.vertices.len(), 3);
        // Right isosceles triangle with legs 1: inradius (2 − √2)/2.
        let r = (2.0 - 2f64.sqrt()) / 2.0;
        assert!((poly.largest_margin(&[0.0; 3]) - r).abs() < 1e-12);
        let shrunk = poly.inset(&[0.1; 3]);
        assert_eq!(shrunk.len(), 3);
        for v in &shrunk {
            assert!((poly.margin_of(v) - 0.1).abs() < 1e-12);
        }
        assert!(poly.inset(&[r + 1e-9; 3]).is_empty());
        // Inside: unchanged; outside: onto the nearest edge of the shrunk triangle.
        let x = P2::new(0.2, 0.2);
        assert_eq!(closest_point(&shrunk, &x), Some(x));
        let c = closest_point(&shrunk, &P2::new(0.5, -1.0)).unwrap();
        assert!((c.y - 0.1).abs() < 1e-12 && poly.margin_of(&c) >= 0.1 - 1e-12);
        assert!(closest_point(&[], &x).is_none());
    }
}
