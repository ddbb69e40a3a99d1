//! The replay page of one traced cell: a single HTML file, the trace's numbers embedded as JSON,
//! drawn on two canvases (a side view along the slope and a view from above, both orthographic)
//! with play, pause, speed and a time slider, and time plots beside them.
//!
//! The robot is drawn from the model: each link as a segment from its joint to its child
//! joints and named frames (forward kinematics of the traced q), the trunk as the outline of
//! the joints it carries, each foot as a circle of the facts' foot radius, sphere collision
//! shapes as circles. The plan's pose (forward kinematics of the plan's q) is a faint ghost.
//! Feet positions, forces and slip speeds are the trace CSV's numbers, written with the same
//! text (`cli_run::trace_num`), so the page and the CSV agree bit for bit.

use super::page::{self, esc, json_in_script};
use crate::cell::TraceRow;
use crate::plant::terrain::{Slope, Terrain};
use crate::robot::LoadedRobot;
use gripsweep_controllers::algorithms::{Workspace, forward_kinematics};
use gripsweep_controllers::spatial::Vec3;
use nalgebra::DVector;
use serde_json::{Value, json};
use std::path::Path;

/// A stance foot whose contact point moves faster than this along the ground is drawn as
/// slipping (mm/s). A display threshold, not a metric: a 20 mm foot at 10 mm/s crosses its
/// own radius in 2 s.
pub const SLIP_MARK_MM_S: f64 = 10.0;

/// Most frames a replay page holds; a longer trace is shown every k-th row (k the least that
/// fits), which keeps the page under about 10 MB whatever `--every` and the duration ask.
pub const MAX_REPLAY_FRAMES: usize = 5000;

/// Rows of a trace of `n` rows that the replay shows: every `stride(n)`-th, from the first.
pub fn stride(n: usize) -> usize {
    n.div_ceil(MAX_REPLAY_FRAMES).max(1)
}

/// The id of the element that holds the replay's data.
pub const DATA_ID: &str = "replay-data";

/// What the page says about the cell beside the trace itself.
pub struct ReplayInfo<'a> {
    pub cell_id: &'a str,
    pub cell_key: &'a str,
    pub status: &'a str,
    pub message: &'a str,
    pub slope_deg: f64,
    pub mu: f64,
    /// Seconds between rows.
    pub row_dt: f64,
    /// The CSV's file name, for the page's note.
    pub csv_name: &'a str,
}

/// Drawing points of one pose: body origins, then the named frames that sit away from their
/// body's origin.
struct Skeleton {
    /// (body, local offset) per point.
    points: Vec<(usize, Vec3)>,
    segments: Vec<[usize; 2]>,
    /// Points of the trunk outline, in order around the trunk.
    trunk: Vec<usize>,
    /// Sphere collision shapes: (point, radius).
    spheres: Vec<(usize, f64)>,
}

fn skeleton(robot: &LoadedRobot) -> Skeleton {
    let model = &robot.model;
    let nb = model.n_bodies();
    let mut points: Vec<(usize, Vec3)> = (0..nb).map(|b| (b, Vec3::zeros())).collect();
    let mut segments = Vec::new();
    for (k, j) in model.joints.iter().enumerate() {
        segments.push([j.parent, k + 1]);
    }
    let mut spheres = Vec::new();
    for f in &model.frames {
        let off = f.placement.trans;
        let at = if off.norm() > 1e-9 {
            points.push((f.body, off));
            segments.push([f.body, points.len() - 1]);
            points.len() - 1
        } else {
            f.body
        };
        // Sphere collision shapes centred on the link frame (the feet's are drawn from the
        // facts' radius at the trace's ground points instead).
        if robot.facts.feet.frames.contains(&f.name) {
            continue;
        }
        if let Some(link) = robot.urdf.links.iter().find(|l| l.name == f.name) {
            for c in &link.collision {
                if let urdf_rs::Geometry::Sphere { radius } = c.geometry
                    && c.origin.xyz.iter().all(|x| x.abs() < 1e-9)
                {
                    spheres.push((at, radius));
                }
            }
        }
    }
    // The trunk: the joints the root carries, ordered by angle about the base z axis.
    let mut hips: Vec<(f64, usize)> = model
        .joints
        .iter()
        .enumerate()
        .filter(|(_, j)| j.parent == 0)
        .map(|(k, j)| (j.x_tree.trans.y.atan2(j.x_tree.trans.x), k + 1))
        .collect();
    hips.sort_by(|a, b| a.0.total_cmp(&b.0));
    // With an outline of three or more joints, the trunk is that outline, not spokes from its
    // origin.
    if hips.len() >= 3 {
        segments.retain(|s| !(s[0] == 0 && hips.iter().any(|h| h.1 == s[1])));
    }
    Skeleton {
        points,
        segments,
        trunk: hips.into_iter().map(|h| h.1).collect(),
        spheres,
    }
}

/// World positions of the skeleton's points for configuration `q`, rounded to 0.1 mm (drawing
/// only), flat x y z.
fn pose_points(robot: &LoadedRobot, sk: &Skeleton, ws: &mut Workspace, q: &[f64]) -> Vec<f64> {
    let q = DVector::from_column_slice(q);
    forward_kinematics(&robot.model, ws, &q);
    let mut out = Vec::with_capacity(sk.points.len() * 3);
    for (b, off) in &sk.points {
        let p = ws.o_m[*b].act_point(off);
        out.extend([p.x, p.y, p.z].map(|x| (x * 1e4).round() / 1e4));
    }
    out
}

fn num(x: f64) -> Value {
    // The same text as the CSV: serde_json writes f64 with the shortest round-trip digits.
    if x.is_finite() { json!(x) } else { Value::Null }
}

/// The replay's data, as embedded in the page.
pub fn replay_json(robot: &LoadedRobot, rows: &[TraceRow], info: &ReplayInfo) -> Value {
    let model = &robot.model;
    let sk = skeleton(robot);
    let mut ws = Workspace::new(model);
    let slope = Slope::degrees(info.slope_deg);
    let (n, t1, t2) = slope.surface_frame(0.0, 0.0);
    let limits: Vec<f64> = model.joints.iter().map(|j| j.effort_limit).collect();
    let mut statuses: Vec<&str> = Vec::new();
    let step = stride(rows.len());
    let mut frames = Vec::with_capacity(rows.len().div_ceil(step));
    let mut xs = (f64::INFINITY, f64::NEG_INFINITY);
    for r in rows.iter().step_by(step) {
        let pts = pose_points(robot, &sk, &mut ws, &r.q);
        let ghost = pose_points(robot, &sk, &mut ws, &r.plan_q);
        for x in pts.iter().step_by(3).chain(ghost.iter().step_by(3)) {
            xs = (xs.0.min(*x), xs.1.max(*x));
        }
        let law = match statuses.iter().position(|s| *s == r.law_status) {
            Some(i) => i,
            None => {
                statuses.push(r.law_status);
                statuses.len() - 1
            }
        };
        let feet: Vec<Value> = (0..r.foot_force.len())
            .map(|i| {
                let f = r.foot_force[i];
                let ft = f[1].hypot(f[2]);
                let use_ = if f[0] > 0.0 {
                    ft / (info.mu * f[0])
                } else {
                    f64::NAN
                };
                json!({
                    "s": r.stance[i] as u8,
                    "p": r.foot_pos[i].map(num),
                    "f": f.map(num),
                    "pf": r.foot_predicted[i].map(num),
                    "v": if r.stance[i] { num(r.foot_slip[i] * 1e3) } else { Value::Null },
                    "u": num(use_),
                })
            })
            .collect();
        let p = Vec3::new(r.q[0], r.q[1], r.q[2]);
        let pr = Vec3::new(r.plan_q[0], r.plan_q[1], r.plan_q[2]);
        let tau_share = r
            .tau
            .iter()
            .zip(&limits)
            .map(|(t, l)| if *l > 0.0 { t.abs() / l } else { 0.0 })
            .fold(0.0, f64::max);
        frames.push(json!({
            "t": num(r.t),
            "x": pts,
            "g": ghost,
            "feet": feet,
            "law": law,
            "err": num(((p - pr).norm() * 1e3 * 100.0).round() / 100.0),
            "tau": num((tau_share * 1e4).round() / 1e4),
        }));
    }
    if !xs.0.is_finite() {
        xs = (-0.5, 0.5);
    }
    let ground: Vec<[f64; 3]> = [xs.0 - 0.3, xs.1 + 0.3]
        .iter()
        .map(|&x| [x, 0.0, slope.height_at(x, 0.0)])
        .collect();
    json!({
        "cell": {"id": info.cell_id, "key": info.cell_key, "status": info.status,
                 "message": info.message},
        "robot": model.name,
        "slope_deg": info.slope_deg,
        "mu": info.mu,
        "row_dt": info.row_dt * step as f64,
        "feet": robot.facts.feet.frames,
        "foot_radius": robot.facts.feet.radius,
        "surface": {"n": [n.x, n.y, n.z], "t1": [t1.x, t1.y, t1.z], "t2": [t2.x, t2.y, t2.z]},
        "ground": ground,
        "segments": sk.segments,
        "trunk": sk.trunk,
        "spheres": sk.spheres.iter().map(|(p, r)| json!([p, r])).collect::<Vec<_>>(),
        "law_statuses": statuses,
        "slip_mark_mm_s": SLIP_MARK_MM_S,
        "frames": frames,
    })
}

/// Writes the replay page for `rows` to `path`.
pub fn write_replay(
    path: &Path,
    robot: &LoadedRobot,
    rows: &[TraceRow],
    info: &ReplayInfo,
) -> Result<(), String> {
    let data = replay_json(robot, rows, info);
    let step = stride(rows.len());
    let n_frames = rows.len().div_ceil(step);
    let title = format!("gripsweep replay · {} · {}", info.cell_key, info.status);
    let mut html = page::open(&title, REPLAY_STYLE);
    html.push_str(&format!(
        "<h1>Replay of one run</h1>\n<p class=\"byline\">cell <code>{}</code> · {} · robot {} · ended <b id=\"cell-status\">{}</b>{}</p>\n",
        esc(info.cell_id),
        esc(info.cell_key),
        esc(&robot.model.name),
        esc(info.status),
        if info.message.is_empty() {
            String::new()
        } else {
            format!(" — {}", esc(info.message))
        }
    ));
    html.push_str(&format!(
        "<noscript><p class=\"card amber\">The replay draws with JavaScript, which is off. \
The same numbers are in <code>{}</code>, one row per frame.</p></noscript>\n",
        esc(info.csv_name)
    ));
    html.push_str(&format!(
        r#"<section id="stage" data-frames="{frames}">
<div class="views">
<figure><canvas id="view-side" width="540" height="330" aria-label="side view"></canvas>
<figcaption>side view (x up the slope to the right, z up)</figcaption></figure>
<figure><canvas id="view-top" width="540" height="330" aria-label="view from above"></canvas>
<figcaption>from above (x up the slope to the right, y up)</figcaption></figure>
</div>
<div class="controls">
<button id="play" type="button">play</button>
<label>speed <select id="speed"><option value="0.25">¼×</option><option value="0.5">½×</option>
<option value="1" selected>1×</option><option value="2">2×</option><option value="4">4×</option></select></label>
<input id="scrub" type="range" min="0" max="{last}" value="0" step="1" aria-label="time">
<span class="readout">t = <b id="clock">0</b> s · frame <b id="frame-no">1</b> of <b id="frame-count">{frames}</b> · law <b id="law-status">—</b></span>
</div>
<p class="legend">Ink: the robot; faint: the plan's pose. Arrows: each foot's measured ground
force, coloured by its friction use ‖f<sub>t</sub>‖/(μ f<sub>n</sub>) at μ = {mu}
<span class="sw" style="background:#5a8a3c"></span>&lt; 0.5
<span class="sw" style="background:#d9a02b"></span>0.5–0.9
<span class="sw" style="background:#c4573a"></span>≥ 0.9 (at the cone's edge);
filled foot: planned stance; ringed foot: a stance foot sliding faster than {mark} mm/s.</p>
</section>
<section class="plots">
<figure><canvas id="plot-err" width="540" height="150"></canvas><figcaption>base position error against the plan (mm)</figcaption></figure>
<figure><canvas id="plot-slip" width="540" height="150"></canvas><figcaption>slip speed of each stance foot (mm/s; blank in swing)</figcaption></figure>
<figure><canvas id="plot-use" width="540" height="150"></canvas><figcaption>friction use of each foot (1 = the cone's edge)</figcaption></figure>
<figure><canvas id="plot-tau" width="540" height="150"></canvas><figcaption>largest joint torque as a share of its limit (1 = the limit)</figcaption></figure>
</section>
<p class="muted">{per_row} ({dt} s apart); the CSV <code>{csv}</code> holds the same numbers.</p>
"#,
        frames = n_frames,
        last = n_frames.saturating_sub(1),
        per_row = if step == 1 {
            "One frame per trace row".to_string()
        } else {
            format!("One frame every {step} trace rows (at most {MAX_REPLAY_FRAMES} frames)")
        },
        mu = info.mu,
        mark = SLIP_MARK_MM_S,
        dt = info.row_dt * step as f64,
        csv = esc(info.csv_name),
    ));
    html.push_str(&format!(
        "<script type=\"application/json\" id=\"{DATA_ID}\">{}</script>\n",
        json_in_script(&data)
    ));
    html.push_str(&page::close(&[REPLAY_SCRIPT]));
    std::fs::write(path, html).map_err(|e| format!("{}: cannot write: {e}", path.display()))
}

const REPLAY_STYLE: &str = r#"
.views,.plots{display:flex;flex-wrap:wrap;gap:10px}
.views figure,.plots figure{margin:0;background:var(--field);border:1px solid var(--rule);padding:4px}
figcaption{color:var(--muted);font-size:12.5px}
canvas{display:block;max-width:100%}
.controls{display:flex;flex-wrap:wrap;align-items:center;gap:12px;margin:10px 0}
.controls button{font:inherit;padding:3px 14px;background:var(--tab);color:#fff;border:0;border-radius:2px}
#scrub{flex:1;min-width:200px}
.legend{font-size:13px}
.sw{display:inline-block;width:12px;height:12px;margin:0 3px 0 8px;vertical-align:middle}
"#;

const REPLAY_SCRIPT: &str = r#"
(function(){
var D=JSON.parse(document.getElementById('replay-data').textContent);
var F=D.frames,N=F.length,cur=0,playing=false,last=null,acc=0;
if(!N){document.getElementById('stage').insertAdjacentHTML('afterbegin','<p class="card amber">No frames to replay: the run ended before its first trace row.</p>');return;}
var ink='#242a31',ghost='rgba(47,75,92,0.22)',rule='#b5ab98';
function useColour(u){if(u===null||!(u>=0))return '#a8a296';return u<0.5?'#5a8a3c':(u<0.9?'#d9a02b':'#c4573a');}
// bounds over every frame (robot and plan), per view, so the scale never jumps
function bounds(a,b){var lo=[1e9,1e9],hi=[-1e9,-1e9];
 F.forEach(function(f){[f.x,f.g].forEach(function(P){for(var i=0;i<P.length;i+=3){
  var u=P[i+a],v=P[i+b];if(u<lo[0])lo[0]=u;if(u>hi[0])hi[0]=u;if(v<lo[1])lo[1]=v;if(v>hi[1])hi[1]=v;}});});
 var pad=0.12;return [lo[0]-pad,hi[0]+pad,lo[1]-pad,hi[1]+pad];}
function view(id,a,b){var c=document.getElementById(id),g=c.getContext('2d'),B=bounds(a,b);
 var s=Math.min(c.width/(B[1]-B[0]),c.height/(B[3]-B[2]));
 var ox=(c.width-s*(B[1]-B[0]))/2,oy=(c.height-s*(B[3]-B[2]))/2;
 return {c:c,g:g,a:a,b:b,s:s,X:function(u){return ox+(u-B[0])*s;},Y:function(v){return c.height-oy-(v-B[2])*s;}};}
var side=view('view-side',0,2),top=view('view-top',0,1);
function pose(V,P,colour,width){var g=V.g;g.strokeStyle=colour;g.lineWidth=width;g.lineCap='round';
 D.segments.forEach(function(sg){var i=3*sg[0],j=3*sg[1];g.beginPath();
  g.moveTo(V.X(P[i+V.a]),V.Y(P[i+V.b]));g.lineTo(V.X(P[j+V.a]),V.Y(P[j+V.b]));g.stroke();});
 if(D.trunk.length>1){g.beginPath();D.trunk.forEach(function(k,n){var x=V.X(P[3*k+V.a]),y=V.Y(P[3*k+V.b]);
  if(n===0)g.moveTo(x,y);else g.lineTo(x,y);});g.closePath();
  g.fillStyle=colour===ink?'rgba(47,75,92,0.35)':'rgba(47,75,92,0.06)';g.fill();g.stroke();}
 D.spheres.forEach(function(sp){var i=3*sp[0];g.beginPath();g.arc(V.X(P[i+V.a]),V.Y(P[i+V.b]),Math.max(2,sp[1]*V.s),0,7);g.stroke();});}
function world(f){var n=D.surface.n,t1=D.surface.t1,t2=D.surface.t2;
 return [0,1,2].map(function(k){return f[0]*n[k]+f[1]*t1[k]+f[2]*t2[k];});}
function draw(V,fr){var g=V.g;g.fillStyle='#fffefa';g.fillRect(0,0,V.c.width,V.c.height);
 if(V===side){g.strokeStyle=rule;g.lineWidth=2;g.beginPath();
  g.moveTo(V.X(D.ground[0][0]),V.Y(D.ground[0][2]));g.lineTo(V.X(D.ground[1][0]),V.Y(D.ground[1][2]));g.stroke();}
 else{g.strokeStyle='#eae4d7';g.lineWidth=1;for(var k=-20;k<=20;k++){var u=k*0.1;
  g.beginPath();g.moveTo(V.X(u),0);g.lineTo(V.X(u),V.c.height);g.stroke();
  g.beginPath();g.moveTo(0,V.Y(u));g.lineTo(V.c.width,V.Y(u));g.stroke();}}
 pose(V,fr.g,ghost,3);pose(V,fr.x,ink,2.2);
 var scale=0.6/(Math.max(1,maxFn));
 fr.feet.forEach(function(ft){var p=ft.p;if(p[0]===null)return;var x=V.X(p[V.a]),y=V.Y(p[V.b]);
  var r=Math.max(3,D.foot_radius*V.s);g.beginPath();g.arc(x,y,r,0,7);
  g.fillStyle=ft.s?ink:'#fffefa';g.fill();g.strokeStyle=ink;g.lineWidth=1.2;g.stroke();
  if(ft.s&&ft.v!==null&&ft.v>D.slip_mark_mm_s){g.beginPath();g.arc(x,y,r+5,0,7);g.strokeStyle='#c4573a';g.lineWidth=2.5;g.stroke();}
  if(ft.f[0]!==null&&ft.f[0]>0){var w=world(ft.f);var ex=V.X(p[V.a]+w[V.a]*scale),ey=V.Y(p[V.b]+w[V.b]*scale);
   var col=useColour(ft.u);g.strokeStyle=col;g.fillStyle=col;g.lineWidth=2.5;g.beginPath();g.moveTo(x,y);g.lineTo(ex,ey);g.stroke();
   var an=Math.atan2(ey-y,ex-x);g.beginPath();g.moveTo(ex,ey);g.lineTo(ex-8*Math.cos(an-0.4),ey-8*Math.sin(an-0.4));
   g.lineTo(ex-8*Math.cos(an+0.4),ey-8*Math.sin(an+0.4));g.closePath();g.fill();}});}
var maxFn=0;F.forEach(function(f){f.feet.forEach(function(ft){if(ft.f[0]>maxFn)maxFn=ft.f[0];});});
var palette=['#1d5c7e','#c4573a','#5a8a3c','#865a9e','#d9a02b','#2e9c8f','#b03f6a','#4a4a4a'];
function plot(id,series,refLine){var c=document.getElementById(id),g=c.getContext('2d');
 var lo=0,hi=refLine||0;series.forEach(function(s){s.forEach(function(v){if(v!==null&&isFinite(v)&&v>hi)hi=v;});});
 if(hi<=0)hi=1;hi*=1.08;var L=40,R=8,T=8,B=18,W=c.width-L-R,H=c.height-T-B;
 function X(i){return L+W*(N>1?i/(N-1):0);}function Y(v){return T+H*(1-(v-lo)/(hi-lo));}
 return function(k){g.fillStyle='#fffefa';g.fillRect(0,0,c.width,c.height);g.strokeStyle=rule;g.lineWidth=1;g.strokeRect(L,T,W,H);
  g.fillStyle='#6f685b';g.font='11px sans-serif';g.fillText(hi.toPrecision(2),2,T+9);g.fillText('0',28,T+H);
  g.fillText(Number(F[N-1].t).toFixed(2)+' s',c.width-50,c.height-4);
  if(refLine){g.setLineDash([5,4]);g.strokeStyle='#8c7f68';g.beginPath();g.moveTo(L,Y(refLine));g.lineTo(L+W,Y(refLine));g.stroke();g.setLineDash([]);}
  series.forEach(function(s,si){g.strokeStyle=palette[si%palette.length];g.lineWidth=1.3;g.beginPath();var pen=false;
   s.forEach(function(v,i){if(v===null||!isFinite(v)){pen=false;return;}var x=X(i),y=Y(Math.min(v,hi));if(pen)g.lineTo(x,y);else g.moveTo(x,y);pen=true;});g.stroke();});
  g.strokeStyle=ink;g.lineWidth=1.5;g.beginPath();g.moveTo(X(k),T);g.lineTo(X(k),T+H);g.stroke();};}
var feetIdx=D.feet.map(function(_,i){return i;});
var plots=[plot('plot-err',[F.map(function(f){return f.err;})],0),
 plot('plot-slip',feetIdx.map(function(i){return F.map(function(f){return f.feet[i].v;});}),D.slip_mark_mm_s),
 plot('plot-use',feetIdx.map(function(i){return F.map(function(f){return f.feet[i].u;});}),1),
 plot('plot-tau',[F.map(function(f){return f.tau;})],1)];
var scrub=document.getElementById('scrub'),btn=document.getElementById('play'),speed=document.getElementById('speed');
function show(k){cur=Math.max(0,Math.min(N-1,k));if(!N)return;var fr=F[cur];draw(side,fr);draw(top,fr);
 plots.forEach(function(p){p(cur);});scrub.value=cur;
 document.getElementById('clock').textContent=Number(fr.t).toFixed(3);
 document.getElementById('frame-no').textContent=cur+1;
 document.getElementById('law-status').textContent=D.law_statuses[fr.law];
 document.getElementById('stage').setAttribute('data-frame',cur);}
function tick(ts){if(!playing)return;if(last!==null){acc+=(ts-last)/1000*parseFloat(speed.value);
 var steps=Math.floor(acc/D.row_dt);if(steps>0){acc-=steps*D.row_dt;if(cur+steps>=N-1){show(N-1);setPlay(false);return;}show(cur+steps);}}
 last=ts;requestAnimationFrame(tick);}
function setPlay(on){playing=on;btn.textContent=on?'pause':'play';last=null;acc=0;if(on){if(cur>=N-1)show(0);requestAnimationFrame(tick);}}
btn.addEventListener('click',function(){setPlay(!playing);});
scrub.addEventListener('input',function(){show(parseInt(scrub.value,10));});
window.gripsweepReplay={show:show,frames:N,current:function(){return cur;}};
show(0);
})();
"#;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn replay_stride_bounds_the_frames() {
        for n in [0, 1, 799, 5000, 5001, 60_000, 200_000] {
            let k = stride(n);
            let frames = n.div_ceil(k);
            assert!(frames <= MAX_REPLAY_FRAMES, "{n} rows → {frames} frames");
            // The least stride that fits: one less would not.
            if k > 1 {
                assert!(n.div_ceil(k - 1) > MAX_REPLAY_FRAMES);
            }
        }
        assert_eq!(stride(800), 1);
    }
}
