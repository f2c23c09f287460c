/*
** report/html.c -- report.html: one self-contained page (inline CSS, inline
** SVG, one small inline script; no network, fonts or images), readable
** from a USB stick in a field office and printable.
**
** Input:  st_report_input (borrowed).
** Output: an HTML5 document appended to an st_buf: the headline (kept, set
**         aside, gate and why), the district map, the charts, the tables
**         behind them (districts, fields, layers, gates, unmapped values,
**         learned defaults), how the run was made, and the cautions.
** Errors: through the sink (ST_ERR_NOMEM, ST_ERR_LIMIT).
** Every text that comes from data (keys, values, paths, the command line)
** is escaped; the page makes no reference to anything outside itself.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "reportInt.h"

static const char *const css =
    ":root{--ink:#1d232b;--muted:#5b6470;--rule:#d9d5cc;--paper:#fcfbf8;--pass:#1f4e79;"
    "--fail:#a8322a}\n"
    "*{box-sizing:border-box}\n"
    "body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.45 system-ui,"
    "-apple-system,\"Segoe UI\",Roboto,\"DejaVu Sans\",Arial,sans-serif}\n"
    "main{max-width:1180px;margin:0 auto;padding:22px 28px 56px}\n"
    "h1{font-size:25px;margin:0 0 2px}h2{font-size:19px;margin:34px 0 8px;padding-bottom:4px;"
    "border-bottom:1px solid var(--rule)}h3{font-size:15px;margin:18px 0 6px}\n"
    ".sub,.note,.legend-note{color:var(--muted);font-size:13px;margin:2px 0}\n"
    ".empty{color:var(--muted);font-style:italic}\n"
    "code{font:13px/1.3 ui-monospace,\"DejaVu Sans Mono\",monospace;overflow-wrap:anywhere}\n"
    ".headline{display:grid;grid-template-columns:minmax(260px,380px) 1fr;gap:18px 28px;"
    "border:3px solid;border-radius:8px;padding:16px 20px;margin:16px 0 8px;background:#fff}\n"
    ".headline.pass{border-color:var(--pass)}.headline.fail{border-color:var(--fail)}\n"
    ".verdict{font-size:27px;font-weight:700;line-height:1.15}\n"
    ".pass .verdict{color:var(--pass)}.fail .verdict{color:var(--fail)}\n"
    ".why{margin:6px 0 0;font-size:14px}.why li{margin:2px 0}\n"
    ".figs{display:flex;flex-wrap:wrap;gap:10px 30px;align-content:flex-start}\n"
    ".fig .n{display:block;font-size:27px;font-weight:650;font-variant-numeric:tabular-nums}\n"
    ".fig .w{color:var(--muted);font-size:13px}\n"
    ".caution-line{grid-column:1/-1;margin:0;font-size:13px;color:var(--muted)}\n"
    "nav.toc{font-size:14px;margin:6px 0}nav.toc a{color:var(--pass);margin-right:14px}\n"
    ".mapbox input{position:absolute;opacity:0;width:1px;height:1px}\n"
    ".mapbox label{display:inline-block;padding:3px 12px;margin:0 6px 8px 0;border:1px solid "
    "#8a8f96;border-radius:14px;cursor:pointer;font-size:14px}\n"
    "#mm-r:checked+label,#mm-a:checked+label{background:var(--ink);color:#fff;border-color:"
    "var(--ink)}\n"
    ".mapbox input:focus-visible+label{outline:2px solid var(--pass);outline-offset:2px}\n"
    ".map{max-width:100%;height:auto;background:#fff;border:1px solid var(--rule)}\n"
    ".map .district{stroke:#fff;stroke-width:1.4;stroke-linejoin:round;fill:#ddd;"
    "fill-rule:evenodd}\n"
    ".map .district:hover{stroke:#000;stroke-width:2.4}\n"
    "#mm-r:checked~.mapframe .district.over{stroke:#000;stroke-dasharray:6 3;stroke-width:2.2}\n"
    ".map .labels{pointer-events:none}.map .labels rect{fill:#fff;fill-opacity:.88;"
    "stroke:#33383f;stroke-width:.5}\n"
    ".map .labels text{font-size:11px;font-weight:650;text-anchor:middle;fill:var(--ink)}\n"
    ".map .labels .v{font-weight:400}#mm-r:checked~.mapframe .la,"
    "#mm-a:checked~.mapframe .lr{display:none}\n"
    ".scalebar path{fill:none;stroke:#33383f;stroke-width:1.5}.scalebar text{font-size:11px}\n"
    ".legend{margin:6px 0}.legend-title{margin:0;font-size:13px;font-weight:600}\n"
    ".legend svg text{font-size:12px;fill:var(--ink)}\n"
    ".legend-a{display:none}#mm-a:checked~.legend-a{display:block}"
    "#mm-a:checked~.legend-r{display:none}\n"
    "figure{margin:14px 0 22px}figcaption{font-weight:600;margin-bottom:4px}\n"
    ".chart{max-width:100%;height:auto}\n"
    ".chart text{font-size:12px;fill:var(--ink)}.chart .code{text-anchor:end}\n"
    ".chart .xl{text-anchor:middle;font-size:11px}.chart .tick{text-anchor:end;font-size:11px;"
    "fill:var(--muted)}\n"
    ".chart .grid{stroke:#e4e0d8}.chart .bar{fill:#2e8296}.chart .axis{text-anchor:middle;"
    "fill:var(--muted)}\n"
    ".chart .in{text-anchor:middle;font-size:11px}.chart .in.light{fill:#fff}\n"
    ".tablewrap{overflow-x:auto}\n"
    "table{border-collapse:collapse;font-size:13px;font-variant-numeric:tabular-nums;"
    "margin:6px 0}\n"
    "th,td{padding:4px 7px;border-bottom:1px solid var(--rule);text-align:left;"
    "vertical-align:top}\n"
    "th{background:#f1efe9;font-weight:600}td:first-child{white-space:nowrap}\n"
    "td.n,th.n{text-align:right}tfoot td{font-weight:600;background:#f7f5f0}\n"
    "th button{all:unset;cursor:pointer}th button:focus-visible{outline:2px solid var(--pass)}\n"
    "th[aria-sort=ascending] button::after{content:\" \\25B2\"}"
    "th[aria-sort=descending] button::after{content:\" \\25BC\"}\n"
    "td.state{white-space:nowrap}tr.under td.state{color:var(--fail);font-weight:600}\n"
    "tr.ok td.state{color:var(--pass)}\n"
    ".warn-cell{font-weight:600}.pass-cell{color:var(--pass);font-weight:600}.fail-cell{color:var(--fail);font-weight:700}\n"
    ".cautions{border-left:4px solid var(--fail);background:#fff;padding:8px 16px}\n"
    "@media print{body{background:#fff;font-size:10.5pt}main{max-width:none;padding:0}"
    "nav.toc,.mapbox label,th button::after{display:none}"
    ".headline,figure,.mapbox,.cautions{break-inside:avoid}tr{break-inside:avoid}"
    "h2{break-after:avoid}*{-webkit-print-color-adjust:exact;print-color-adjust:exact}"
    ".tablewrap{overflow:visible}}\n";

/* Sorts a table by the clicked column; numbers sort by their data-v value.
** The last line marks the page so a test can see the script ran through. */
static const char *const script =
    "(function(){\n"
    "'use strict';\n"
    "function val(td){var v=td.getAttribute('data-v');return v===null?td.textContent:v;}\n"
    "function sortBy(table,col,th,numeric){\n"
    "  var asc=th.getAttribute('aria-sort')!=='ascending';\n"
    "  var heads=table.tHead.rows[0].cells;\n"
    "  for(var i=0;i<heads.length;i++)heads[i].setAttribute('aria-sort','none');\n"
    "  var body=table.tBodies[0],rows=Array.prototype.slice.call(body.rows);\n"
    "  rows.sort(function(a,b){\n"
    "    var x=val(a.cells[col]),y=val(b.cells[col]),c;\n"
    "    if(numeric){x=parseFloat(x);y=parseFloat(y);\n"
    "      if(isNaN(x))x=-Infinity;if(isNaN(y))y=-Infinity;c=x===y?0:(x>y?1:-1);}\n"
    "    else c=x.localeCompare(y);\n"
    "    return asc?c:-c;});\n"
    "  rows.forEach(function(r){body.appendChild(r);});\n"
    "  th.setAttribute('aria-sort',asc?'ascending':'descending');\n"
    "}\n"
    "var tables=document.querySelectorAll('table.sortable');\n"
    "Array.prototype.forEach.call(tables,function(table){\n"
    "  Array.prototype.forEach.call(table.tHead.rows[0].cells,function(th,col){\n"
    "    var b=th.querySelector('button');\n"
    "    if(b)b.addEventListener('click',function(){\n"
    "      sortBy(table,col,th,th.getAttribute('data-type')==='num');});\n"
    "  });\n"
    "});\n"
    "document.documentElement.setAttribute('data-script','ok');\n"
    "})();\n";

/* ---- small pieces ------------------------------------------------------------- */

static void sortable_head(st_rout *o, const char *const *cols, const int *numeric, size_t n)
{
    st_rout_puts(o, "<thead><tr>");
    for (size_t i = 0; i < n; i++)
        st_rout_printf(o, "<th%s aria-sort=\"none\"><button type=\"button\">%s</button></th>",
                       numeric[i] ? " class=\"n\" data-type=\"num\"" : "", cols[i]);
    st_rout_puts(o, "</tr></thead>");
}

static void td_count(st_rout *o, uint64_t n)
{
    st_rout_printf(o, "<td class=\"n\" data-v=\"%llu\">", (unsigned long long)n);
    st_rout_count(o, n);
    st_rout_puts(o, "</td>");
}

static void td_share(st_rout *o, double v)
{
    if (isnan(v))
        st_rout_puts(o, "<td class=\"n\" data-v=\"\">\xE2\x80\x93</td>");
    else {
        st_rout_printf(o, "<td class=\"n\" data-v=\"%.6f\">", v);
        st_rout_pct(o, v, 0);
        st_rout_puts(o, "</td>");
    }
}

static void td_text(st_rout *o, const char *s)
{
    st_rout_puts(o, "<td>");
    st_rout_esc(o, s ? s : "");
    st_rout_puts(o, "</td>");
}

static void td_m2(st_rout *o, double v)
{
    st_rout_printf(o, "<td class=\"n\" data-v=\"%.2f\">", v);
    st_rout_count(o, (uint64_t)llround(v > 0 ? v : 0));
    st_rout_puts(o, "</td>");
}

static void fig(st_rout *o, uint64_t n, const char *words)
{
    st_rout_puts(o, "<div class=\"fig\"><span class=\"n\">");
    st_rout_count(o, n);
    st_rout_printf(o, "</span><span class=\"w\">%s</span></div>", words);
}

/* ---- sections ---------------------------------------------------------------------- */

/* One list item per gate condition that held, with by how much. */
static void gate_items(st_rout *o, const st_audit_gate *g, size_t n, int fails)
{
    for (size_t i = 0; i < n; i++) {
        if (g[i].passed || (g[i].fails != 0) != fails)
            continue;
        st_rout_puts(o, "<li><code>");
        st_rout_esc(o, g[i].statement);
        st_rout_puts(o, "</code>");
        int said = g[i].detail && strcmp(g[i].detail, g[i].statement ? g[i].statement : "");
        if (said) {
            st_rout_puts(o, ": ");
            st_rout_esc(o, g[i].detail);
        }
        if (isfinite(g[i].value) && isfinite(g[i].limit)) {
            if (!said)
                st_rout_printf(o, ": measured %.4g, limit %.4g", g[i].value, g[i].limit);
            st_rout_printf(o, " (off by %.4g)", fabs(g[i].value - g[i].limit));
        }
        st_rout_puts(o, "</li>");
    }
}

static void gate_why(st_rout *o, const st_report_input *in)
{
    st_audit_gate fallback;
    const st_audit_gate *g = NULL;
    size_t n = st_rep_gates(in, &fallback, &g);
    if (!n) {
        st_rout_puts(o, "<p class=\"why\">No gate condition was evaluated (no <code>gate</code> "
                        "statement applied and no <code>--fail-on</code>).</p>");
        return;
    }
    size_t failed = 0, warned = 0;
    for (size_t i = 0; i < n; i++) {
        failed += !g[i].passed && g[i].fails;
        warned += !g[i].passed && !g[i].fails;
    }
    if (failed) {
        st_rout_puts(o, "<ul class=\"why\">");
        gate_items(o, g, n, 1);
        st_rout_puts(o, "</ul>");
    } else
        st_rout_printf(o, "<p class=\"why\">%zu of %zu gate condition%s passed.</p>", n - warned,
                       n, n == 1 ? "" : "s");
    if (warned) {
        st_rout_puts(o, "<p class=\"why\">Warnings (they do not fail the run):</p><ul class=\"why\">");
        gate_items(o, g, n, 0);
        st_rout_puts(o, "</ul>");
    }
}

static void headline(st_rout *o, const st_report_input *in)
{
    st_run_layer t;
    st_rep_balance_total(in->run, &t);
    int failed = st_rep_gate_failed(in);
    st_rout_printf(o, "<section class=\"headline %s\" id=\"headline\"><div>"
                      "<div class=\"verdict\">%s</div>",
                   failed ? "fail" : "pass",
                   failed ? "\xE2\x9C\x97 Gate failed" : "\xE2\x9C\x93 Gate passed");
    gate_why(o, in);
    st_rout_puts(o, "</div><div class=\"figs\">");
    fig(o, t.kept, "buildings kept");
    fig(o, t.duplicate + t.rejected, "set aside (duplicate or rejected)");
    fig(o, t.read, "features read");
    fig(o, in->run->findings[ST_SEV_ERROR], "error findings");
    const st_audit *a = in->audit;
    if (a) {
        uint64_t under = 0, with_ref = 0;
        for (size_t i = 0; i < a->ndistricts; i++) {
            under += a->districts[i].ref == ST_REF_UNDER;
            with_ref += a->districts[i].expected >= 0;
        }
        if (with_ref) {
            st_rout_puts(o, "<div class=\"fig\"><span class=\"n\">");
            st_rout_count(o, under);
            st_rout_puts(o, " / ");
            st_rout_count(o, with_ref);
            st_rout_printf(o, "</span><span class=\"w\">districts under-mapped (ratio below "
                              "%g%%)</span></div>", 100 * a->under_ratio);
        }
        if (a->nfields) {
            st_rout_puts(o, "<div class=\"fig\"><span class=\"n\">");
            st_rout_pct(o, st_rep_assumed_share(a, &a->total), 0);
            st_rout_puts(o, "</span><span class=\"w\">of schema values assumed from "
                            "defaults</span></div>");
        }
    }
    st_rout_printf(o, "</div><p class=\"caution-line\">read = kept + set aside: %s. "
                      "Assumed values are estimates for planning; see "
                      "<a href=\"#cautions\">Cautions</a>.</p></section>",
                   t.read == t.kept + t.duplicate + t.rejected ? "balanced for every layer"
                                                               : "NOT BALANCED");
}

static void toc(st_rout *o)
{
    st_rout_puts(o, "<nav class=\"toc\"><a href=\"#map\">Map</a><a href=\"#charts\">Charts</a>"
                    "<a href=\"#districts\">Districts</a><a href=\"#balance\">Layers</a>"
                    "<a href=\"#gate\">Gate</a><a href=\"#unmapped\">Unmapped values</a>"
                    "<a href=\"#learned\">Learned defaults</a><a href=\"#run\">Run</a>"
                    "<a href=\"#cautions\">Cautions</a></nav>");
}

static void map_section(st_rout *o, const st_audit *a)
{
    st_rout_puts(o, "<section id=\"map\"><h2>Districts</h2>");
    st_rep_svg_map(o, a);
    if (st_rep_mapped_districts(a))
        st_rout_puts(o, "<p class=\"note\">Hover over a district for its figures. Lambert "
                        "azimuthal equal-area projection centred on the area, north up.</p>");
    st_rout_puts(o, "</section>");
}

static void fields_table(st_rout *o, const st_audit *a)
{
    if (!a || !a->nfields || !a->total.fields)
        return;
    static const st_provenance order[ST_NPROV] = {ST_PROV_SOURCE, ST_PROV_DERIVED,
                                                  ST_PROV_DEFAULT, ST_PROV_DRAWN,
                                                  ST_PROV_UNKNOWN};
    st_rout_puts(o, "<h3>Field completeness (buildings kept)</h3><div class=\"tablewrap\">"
                    "<table><thead><tr><th>Field</th>");
    for (int k = 0; k < ST_NPROV; k++)
        st_rout_printf(o, "<th class=\"n\">%s</th>", st_provenance_name(order[k]));
    st_rout_puts(o, "<th class=\"n\">Known</th><th class=\"n\">Observed</th></tr></thead><tbody>");
    for (uint32_t i = 0; i < a->nfields; i++) {
        const st_audit_field *f = &a->total.fields[i];
        uint64_t t = st_rep_field_total(f);
        st_rout_puts(o, "<tr>");
        td_text(o, a->fields[i]);
        for (int k = 0; k < ST_NPROV; k++)
            td_count(o, f->by_prov[order[k]]);
        td_share(o, t ? (double)(t - f->by_prov[ST_PROV_UNKNOWN]) / (double)t : NAN);
        td_share(o, t ? (double)(f->by_prov[ST_PROV_SOURCE] + f->by_prov[ST_PROV_DERIVED]) /
                            (double)t
                      : NAN);
        st_rout_puts(o, "</tr>");
    }
    st_rout_puts(o, "</tbody></table></div>");
}

static void charts_section(st_rout *o, const st_report_input *in)
{
    st_rout_puts(o, "<section id=\"charts\"><h2>Findings and completeness</h2>");
    st_rout_puts(o, "<figure><figcaption>Findings by code</figcaption>");
    st_rep_svg_findings(o, in->run);
    st_rout_puts(o, "</figure><figure><figcaption>Field completeness by provenance (share of "
                    "buildings kept)</figcaption>");
    st_rep_svg_provenance(o, in->audit);
    fields_table(o, in->audit);
    st_rout_puts(o, "</figure><figure><figcaption>Footprint areas of the buildings kept"
                    "</figcaption>");
    st_rep_svg_area(o, in->dist);
    st_rout_puts(o, "</figure><figure><figcaption>Storeys of the buildings kept</figcaption>");
    st_rep_svg_storeys(o, in->dist);
    st_rout_puts(o, "</figure></section>");
}

static void district_row(st_rout *o, const st_audit *a, const st_audit_district *d,
                         const char *label)
{
    st_rout_printf(o, "<tr class=\"%s\">", st_rep_ref_name(d->ref));
    td_text(o, label ? label : d->key);
    td_text(o, d->region);
    td_count(o, d->buildings);
    if (d->expected >= 0)
        td_count(o, (uint64_t)d->expected);
    else
        st_rout_puts(o, "<td class=\"n\" data-v=\"\">\xE2\x80\x93</td>");
    td_share(o, d->ratio);
    st_rout_puts(o, "<td class=\"state\">");
    if (!label && d->ref != ST_REF_NONE)
        st_rout_puts(o, d->ref == ST_REF_OK ? "ok" : st_rep_ref_words(d->ref));
    st_rout_puts(o, "</td>");
    td_share(o, st_rep_prov_share(a, d, ST_PROV_DERIVED, ST_PROV_SOURCE));
    td_share(o, st_rep_assumed_share(a, d));
    td_count(o, d->duplicate + d->rejected);
    td_count(o, d->findings[ST_SEV_ERROR]);
    td_count(o, d->findings[ST_SEV_WARNING]);
    td_m2(o, d->footprint_m2);
    td_m2(o, d->floor_m2);
    st_rout_puts(o, "</tr>");
}

static void districts_section(st_rout *o, const st_audit *a)
{
    st_rout_puts(o, "<section id=\"districts\"><h2>District table</h2>");
    if (!a || !a->ndistricts) {
        st_rout_puts(o, "<p class=\"empty\">No district figures in this run.</p></section>");
        return;
    }
    static const char *const cols[] = {"District", "Region", "Buildings", "Reference", "Ratio",
                                       "State", "Observed", "Assumed", "Set aside", "Errors",
                                       "Warnings", "Footprint m\xC2\xB2", "Floor area m\xC2\xB2"};
    static const int num[] = {0, 0, 1, 1, 1, 0, 1, 1, 1, 1, 1, 1, 1};
    st_rout_puts(o, "<p class=\"note\">Click a column heading to sort. Observed and assumed: "
                    "shares of all schema values of the district's buildings (source or "
                    "derived; default or drawn). Set aside: duplicate and rejected features the "
                    "audit placed in the district. Floor area counts buildings with known "
                    "storeys only.</p><div class=\"tablewrap\"><table class=\"sortable\" "
                    "id=\"district-table\">");
    sortable_head(o, cols, num, sizeof cols / sizeof *cols);
    st_rout_puts(o, "<tbody>");
    size_t nd = a->ndistricts;
    int has_none = nd && !strcmp(a->districts[nd - 1].key, "none") && !a->districts[nd - 1].geom;
    size_t rows = nd - (has_none ? 1 : 0);
    size_t shown = rows < ST_REPORT_HTML_MAX_DISTRICTS ? rows : ST_REPORT_HTML_MAX_DISTRICTS;
    for (size_t i = 0; i < shown; i++)
        district_row(o, a, &a->districts[i], NULL);
    st_rout_puts(o, "</tbody><tfoot>");
    if (has_none)
        district_row(o, a, &a->districts[nd - 1], "no district");
    district_row(o, a, &a->total, "all");
    st_rout_puts(o, "</tfoot></table></div>");
    if (shown < rows)
        st_rout_printf(o, "<p class=\"note\">The first %zu of %zu districts; report.json has "
                          "every one.</p>", shown, rows);
    if (a->nref_unknown) {
        st_rout_puts(o, "<p>Reference keys with no district in the layer: ");
        for (size_t i = 0; i < a->nref_unknown; i++) {
            st_rout_puts(o, i ? ", <code>" : "<code>");
            st_rout_esc(o, a->ref_unknown[i]);
            st_rout_puts(o, "</code>");
        }
        st_rout_puts(o, "</p>");
    }
    st_rout_puts(o, "</section>");
}

static void balance_section(st_rout *o, const st_run_result *r)
{
    st_rout_puts(o, "<section id=\"balance\"><h2>Input layers: nothing lost</h2>"
                    "<p class=\"note\">Every feature read is in <code>buildings</code> (kept, "
                    "perhaps repaired) or in <code>set_aside</code> (duplicate or rejected).</p>"
                    "<div class=\"tablewrap\"><table><thead><tr><th>Layer</th><th>File</th>"
                    "<th>Format</th><th class=\"n\">Read</th><th class=\"n\">Kept</th>"
                    "<th class=\"n\">Repaired</th><th class=\"n\">Duplicate</th>"
                    "<th class=\"n\">Rejected</th><th>Balance</th></tr></thead><tbody>");
    st_run_layer t;
    st_rep_balance_total(r, &t);
    for (size_t l = 0; l <= r->nlayers; l++) {
        const st_run_layer *L = l < r->nlayers ? &r->layers[l] : &t;
        if (l == r->nlayers)
            st_rout_puts(o, "</tbody><tfoot>");
        int ok = L->read == L->kept + L->duplicate + L->rejected;
        st_rout_puts(o, "<tr>");
        td_text(o, l < r->nlayers ? L->name : "all layers");
        if (l < r->nlayers) {
            st_rout_puts(o, "<td><code>");
            st_rout_esc(o, L->path);
            st_rout_puts(o, "</code></td>");
        } else
            st_rout_puts(o, "<td></td>");
        td_text(o, l < r->nlayers ? L->format : "");
        td_count(o, L->read);
        td_count(o, L->kept);
        td_count(o, L->repaired);
        td_count(o, L->duplicate);
        td_count(o, L->rejected);
        st_rout_printf(o, "<td class=\"%s\">%s</td></tr>", ok ? "pass-cell" : "fail-cell",
                       ok ? "read = kept + set aside" : "UNBALANCED");
    }
    st_rout_puts(o, "</tfoot></table></div></section>");
}

static void gate_section(st_rout *o, const st_report_input *in)
{
    st_audit_gate fallback;
    const st_audit_gate *g = NULL;
    size_t n = st_rep_gates(in, &fallback, &g);
    st_rout_puts(o, "<section id=\"gate\"><h2>Quality gate</h2>");
    if (!n) {
        st_rout_puts(o, "<p class=\"empty\">No gate condition was evaluated.</p></section>");
        return;
    }
    st_rout_puts(o, "<p class=\"note\">The run exits with code 1 when any condition fails, so a "
                    "pipeline can stop before the damage model.</p><div class=\"tablewrap\">"
                    "<table><thead><tr><th>Result</th><th>Condition</th><th>Rule</th>"
                    "<th class=\"n\">Measured</th><th class=\"n\">Limit</th><th>Detail</th>"
                    "</tr></thead><tbody>");
    for (size_t i = 0; i < n; i++) {
        st_rout_printf(o, "<tr><td class=\"%s\">%s</td><td><code>",
                       g[i].passed ? "pass-cell" : g[i].fails ? "fail-cell" : "warn-cell",
                       st_rep_gate_word(&g[i]));
        st_rout_esc(o, g[i].statement);
        st_rout_puts(o, "</code></td>");
        td_text(o, g[i].rule);
        if (isfinite(g[i].value))
            st_rout_printf(o, "<td class=\"n\">%.4g</td>", g[i].value);
        else
            st_rout_puts(o, "<td class=\"n\"></td>");
        if (isfinite(g[i].limit))
            st_rout_printf(o, "<td class=\"n\">%.4g</td>", g[i].limit);
        else
            st_rout_puts(o, "<td class=\"n\"></td>");
        td_text(o, g[i].detail);
        st_rout_puts(o, "</tr>");
    }
    st_rout_puts(o, "</tbody></table></div></section>");
}

static void unmapped_section(st_rout *o, const st_report_input *in)
{
    size_t total = st_rep_unmapped_count(in);
    st_rout_puts(o, "<section id=\"unmapped\"><h2>Unmapped source values</h2>");
    if (!total) {
        st_rout_puts(o, "<p class=\"empty\">None: every source value met a map line (or the "
                        "run had no map rules).</p></section>");
        return;
    }
    st_rout_puts(o, "<p class=\"note\">Values no map line matched, most frequent first: "
                    "candidates for the next version of the rules.</p><div class=\"tablewrap\">"
                    "<table class=\"sortable\" id=\"unmapped-table\">");
    static const char *const cols[] = {"Field", "Value", "Buildings"};
    static const int num[] = {0, 0, 1};
    sortable_head(o, cols, num, 3);
    st_rout_puts(o, "<tbody>");
    size_t n = total < ST_REPORT_HTML_MAX_UNMAPPED ? total : ST_REPORT_HTML_MAX_UNMAPPED;
    for (size_t i = 0; i < n; i++) {
        const char *field, *value;
        uint64_t count;
        st_rep_unmapped_at(in, i, &field, &value, &count);
        st_rout_puts(o, "<tr>");
        td_text(o, field);
        st_rout_puts(o, "<td><code>");
        st_rout_esc(o, value);
        st_rout_puts(o, "</code></td>");
        td_count(o, count);
        st_rout_puts(o, "</tr>");
    }
    st_rout_puts(o, "</tbody></table></div>");
    if (total > n)
        st_rout_printf(o, "<p class=\"note\">%zu more in report.json.</p>", total - n);
    st_rout_puts(o, "</section>");
}

static void learned_section(st_rout *o, const st_audit *a)
{
    st_rout_puts(o, "<section id=\"learned\"><h2>Learned defaults</h2>");
    if (!a || !a->nlearned) {
        st_rout_puts(o, "<p class=\"empty\">No defaults were learned from the data in this "
                        "run.</p></section>");
        return;
    }
    st_rout_puts(o, "<p class=\"note\">Distributions learned from buildings with observed "
                    "values, then used to fill the gaps.</p><div class=\"tablewrap\">"
                    "<table class=\"sortable\" id=\"learned-table\">");
    static const char *const cols[] = {"District", "Field", "Learned from", "Distribution"};
    static const int num[] = {0, 0, 1, 0};
    sortable_head(o, cols, num, 4);
    st_rout_puts(o, "<tbody>");
    size_t n = a->nlearned < ST_REPORT_HTML_MAX_LEARNED ? a->nlearned : ST_REPORT_HTML_MAX_LEARNED;
    for (size_t i = 0; i < n; i++) {
        st_rout_puts(o, "<tr>");
        td_text(o, a->learned[i].district);
        td_text(o, a->learned[i].field);
        td_count(o, a->learned[i].from_buildings);
        td_text(o, a->learned[i].distribution);
        st_rout_puts(o, "</tr>");
    }
    st_rout_puts(o, "</tbody></table></div>");
    if (a->nlearned > n)
        st_rout_printf(o, "<p class=\"note\">%zu more in report.json.</p>", a->nlearned - n);
    st_rout_puts(o, "</section>");
}

static void run_section(st_rout *o, const st_report_input *in)
{
    st_rout_puts(o, "<section id=\"run\"><h2>How this report was made</h2><table><tbody>");
    st_rout_puts(o, "<tr><th>Tool</th><td>stocktake " ST_VERSION "</td></tr>");
    st_rout_puts(o, "<tr><th>Command</th><td><code>");
    st_rout_esc(o, in->command_line ? in->command_line : "");
    st_rout_puts(o, "</code></td></tr><tr><th>Started</th>");
    td_text(o, in->started);
    st_rout_puts(o, "</tr><tr><th>Finished</th>");
    td_text(o, in->finished);
    st_rout_puts(o, "</tr><tr><th>Seed</th>");
    if (in->has_seed)
        st_rout_printf(o, "<td>%llu</td>", (unsigned long long)in->seed);
    else
        st_rout_puts(o, "<td>none</td>");
    st_rout_puts(o, "</tr>");
    for (size_t i = 0; i < in->noutputs; i++) {
        st_rout_printf(o, "<tr><th>%s</th><td><code>", i ? "" : "Outputs");
        st_rout_esc(o, in->outputs[i]);
        st_rout_puts(o, "</code></td></tr>");
    }
    st_rout_puts(o, "</tbody></table>");
    if (in->nfiles) {
        st_rout_puts(o, "<h3>Files read (SHA-256)</h3><div class=\"tablewrap\"><table><thead><tr>"
                        "<th>Role</th><th>File</th><th class=\"n\">Bytes</th><th>SHA-256</th>"
                        "</tr></thead><tbody>");
        for (size_t i = 0; i < in->nfiles; i++) {
            st_rout_puts(o, "<tr>");
            td_text(o, in->files[i].role);
            st_rout_puts(o, "<td><code>");
            st_rout_esc(o, in->files[i].path);
            st_rout_puts(o, "</code></td>");
            td_count(o, in->files[i].bytes);
            st_rout_puts(o, "<td><code>");
            st_rout_esc(o, in->files[i].sha256);
            st_rout_puts(o, "</code></td></tr>");
        }
        st_rout_puts(o, "</tbody></table></div>");
    }
    st_rout_puts(o, "</section>");
}

static void cautions_section(st_rout *o)
{
    st_rout_puts(o,
                 "<section id=\"cautions\"><h2>Cautions</h2><div class=\"cautions\"><ul>"
                 "<li>Attributes filled from defaults (provenance <em>default</em> or "
                 "<em>drawn</em>) are estimates for planning, to be verified in the field.</li>"
                 "<li>This inventory does not replace inspection of any building.</li>"
                 "<li>For decisions about a particular building, defer to local codes and "
                 "licensed engineers.</li>"
                 "<li>Reference counts (census, estimates) have their own errors and dates; a "
                 "completeness ratio compares two imperfect counts.</li>"
                 "</ul></div></section>");
}

st_status st_report_html(const st_report_input *in, st_buf *out)
{
    st_rout o = {out, ST_OK};
    st_rout_puts(&o, "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
                     "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
                     "<title>Inventory quality report");
    if (in->noutputs) {
        const char *base = strrchr(in->outputs[0], '/');
        st_rout_puts(&o, " \xE2\x80\x93 ");
        st_rout_esc(&o, base ? base + 1 : in->outputs[0]);
    }
    st_rout_puts(&o, "</title>\n<style>\n");
    st_rout_puts(&o, css);
    for (int c = 0; c < ST_REP_CLASSES; c++)
        st_rout_printf(&o, "#mm-r:checked~.mapframe .r%d{fill:%s}"
                           "#mm-a:checked~.mapframe .a%d{fill:%s}\n",
                       c, st_rep_ratio_colours[c], c, st_rep_assumed_colours[c]);
    st_rout_puts(&o, "#mm-r:checked~.mapframe .rn,#mm-a:checked~.mapframe .an{fill:url(#nohatch)}\n"
                     "</style>\n</head>\n<body>\n<main>\n");
    st_rout_puts(&o, "<header class=\"top\"><h1>Building inventory: quality report</h1>"
                     "<p class=\"sub\">stocktake " ST_VERSION);
    if (in->finished) {
        st_rout_puts(&o, " \xC2\xB7 finished ");
        st_rout_esc(&o, in->finished);
    }
    st_rout_puts(&o, "</p></header>\n");
    headline(&o, in);
    toc(&o);
    map_section(&o, in->audit);
    charts_section(&o, in);
    districts_section(&o, in->audit);
    balance_section(&o, in->run);
    gate_section(&o, in);
    unmapped_section(&o, in);
    learned_section(&o, in->audit);
    run_section(&o, in);
    cautions_section(&o);
    st_rout_puts(&o, "\n</main>\n<script>\n");
    st_rout_puts(&o, script);
    st_rout_puts(&o, "</script>\n</body>\n</html>\n");
    return o.rc;
}
