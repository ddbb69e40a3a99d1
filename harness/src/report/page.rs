//! What the two HTML pages (`report.html` and a trace's replay) share: escaping, the look
//! (one stylesheet of our own, with print rules) and the small table-sorting script.
//!
//! Both pages are single files: no fetched fonts, scripts, styles or images, so they open
//! offline and can be mailed.

/// Text safe inside HTML elements and double-quoted attributes.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for ch in s.chars() {
        match ch {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// JSON text safe inside a `<script type="application/json">` element: `</` could close it.
pub fn json_in_script(v: &serde_json::Value) -> String {
    v.to_string().replace("</", "<\\/")
}

/// The stylesheet: paper tones taken from the figures' palette (`look.rs`), a serif for
/// headings and a sans for numbers, tables that stay readable in black and white.
pub const STYLE: &str = r#"
:root{--paper:#f6f3ec;--field:#fffefa;--ink:#242a31;--muted:#6f685b;--rule:#d8cfbd;
--tab:#2f4b5c;--held:#5a8a3c;--amber:#d9a02b;--fell:#c4573a;--beyond:#9a7698;--none:#a8a296}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);
font:15px/1.45 "DejaVu Sans",Verdana,sans-serif}
main{max-width:1180px;margin:0 auto;padding:18px 26px 60px}
h1,h2,h3{font-family:"DejaVu Serif",Georgia,serif;font-weight:normal;color:var(--tab)}
h1{font-size:27px;margin:6px 0 2px}
h2{font-size:21px;margin:34px 0 8px;padding-top:10px;border-top:3px double var(--rule)}
h3{font-size:17px;margin:20px 0 6px}
.byline{color:var(--muted);margin:0 0 14px}
.card{background:var(--field);border:1px solid var(--rule);border-left:6px solid var(--tab);
padding:10px 16px;margin:10px 0;border-radius:2px}
.card.fell{border-left-color:var(--fell)}.card.held{border-left-color:var(--held)}
.card.amber{border-left-color:var(--amber)}
.card h3{margin:2px 0 4px}
.tally{display:inline-block;min-width:1.6em;padding:0 5px;margin-right:3px;border-radius:2px;
color:#fff;font-size:13px;text-align:center}
.t-held{background:var(--held)}.t-fell{background:var(--fell)}.t-amber{background:var(--amber);color:#222}
.t-beyond{background:var(--beyond)}.t-none{background:var(--none)}
table{border-collapse:collapse;margin:8px 0 14px;background:var(--field);font-size:13.5px}
th,td{border:1px solid var(--rule);padding:3px 8px;vertical-align:top}
th{background:#ebe5d8;text-align:left;font-weight:600}
td.n{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
th.sortable{cursor:pointer}
th.sortable::after{content:" \2195";color:var(--muted);font-weight:normal}
th[aria-sort=ascending]::after{content:" \2191"}th[aria-sort=descending]::after{content:" \2193"}
tr.lead td.lead{font-weight:700}
.fig{background:var(--field);border:1px solid var(--rule);padding:6px;margin:10px 0;overflow-x:auto}
.fig svg{max-width:100%;height:auto;display:block}
.fig figcaption{color:var(--muted);font-size:13px;padding:4px 2px}
code,.cmd{font-family:"DejaVu Sans Mono",monospace;font-size:12.5px}
.cmd{background:#efe9dc;padding:1px 4px;border-radius:2px;word-break:break-all}
.muted{color:var(--muted)}
.scroll{overflow-x:auto}
nav.toc{font-size:13.5px;columns:2;margin:6px 0 10px}
nav.toc a{color:var(--tab)}
@media print{
 body{background:#fff;font-size:11pt}
 main{max-width:none;padding:0}
 nav.toc,.noprint,noscript{display:none}
 h2{break-after:avoid}
 .card,.fig,table,tr{break-inside:avoid}
 th.sortable::after{content:""}
 .cmd{background:none;border:1px solid #bbb}
 a{color:inherit;text-decoration:none}
}
"#;

/// Sorts a table when one of its `th.sortable` headers is clicked: numbers by value (the
/// first number in the cell; `—` and blanks last), text alphabetically. Without JavaScript
/// the tables keep the order the report wrote them in.
pub const SORT_SCRIPT: &str = r#"
(function(){
function key(td){var t=td.getAttribute('data-v');if(t===null)t=td.textContent;
var m=t.replace(/\u2212/g,'-').match(/-?\d+(\.\d+)?(e-?\d+)?/i);return m?parseFloat(m[0]):null;}
document.querySelectorAll('table.sortable').forEach(function(tb){
 var heads=tb.querySelectorAll('thead th');
 heads.forEach(function(th,col){th.classList.add('sortable');th.tabIndex=0;
  function go(){var asc=th.getAttribute('aria-sort')!=='ascending';
   heads.forEach(function(h){h.removeAttribute('aria-sort');});
   th.setAttribute('aria-sort',asc?'ascending':'descending');
   var body=tb.tBodies[0];var rows=Array.prototype.slice.call(body.rows);
   var numeric=th.classList.contains('num');
   rows.sort(function(a,b){var x=a.cells[col],y=b.cells[col];
    if(numeric){var p=key(x),q=key(y);if(p===null&&q===null)return 0;if(p===null)return 1;if(q===null)return -1;
     return asc?p-q:q-p;}
    var s=x.textContent.localeCompare(y.textContent);return asc?s:-s;});
   rows.forEach(function(r){body.appendChild(r);});}
  th.addEventListener('click',go);
  th.addEventListener('keydown',function(e){if(e.key==='Enter')go();});});
});})();
"#;

/// The page's head and opening of `<main>`.
pub fn open(title: &str, extra_style: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
<meta name=\"generator\" content=\"gripsweep\">\n<title>{}</title>\n<style>{STYLE}{extra_style}</style>\n</head>\n<body>\n<main>\n",
        esc(title)
    )
}

/// Closing of the page, with the given inline scripts.
pub fn close(scripts: &[&str]) -> String {
    let mut s = String::from("</main>\n");
    for js in scripts {
        s.push_str("<script>");
        s.push_str(js);
        s.push_str("</script>\n");
    }
    s.push_str("</body>\n</html>\n");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn page_escapes_markup_and_script_ends() {
        assert_eq!(esc("a<b & \"c\"'"), "a&lt;b &amp; &quot;c&quot;&#39;");
        let v = serde_json::json!({"s": "</script><b>"});
        assert!(!json_in_script(&v).contains("</"));
    }
}
