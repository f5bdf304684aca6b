// Package dashboard serves touchledger's dashboard: one HTML page of SVG
// charts drawn on the server from the same query answers as the JSON API,
// with an embedded stylesheet. Nothing is loaded from elsewhere (no
// scripts, fonts or CDNs; the page's Content-Security-Policy forbids it), so
// it works offline, and there is no front-end build step.
//
// # Charts and the answers they come from
//
// Every chart is one query.Request asked through Querier.Answer (Fetch):
//
//	credit per channel per day     {shift, model, days}                       LineChart
//	all models side by side        {credit, m, last} ∀ m                      DotPlot (with Options.Truth:
//	                               (and query.Scorecard with a truth)         the true share as a ring)
//	where journeys go next         {transitions, level channel, last}         Heatmap
//	where sessions go next         {transitions, level action, last},         NextSteps
//	                               {paths, level action, top MainPaths, last} (paths: the summary)
//	funnel and step abandonment    {funnel, last}                             FunnelChart
//	abandonment over time          {alerts, points, last}                     ControlChart (whole window, and Zoom:
//	                                                                          the latest alert ± 4 h, else the last day)
//
// Every chart has an accessible name and description (<title>, <desc>,
// role="img" and aria-labelledby), a tooltip (<title>) on each mark with its
// exact numbers, a one- or two-sentence text summary under it and a table of
// its numbers in a <details> element. The page reloads itself every
// RefreshSeconds (a meta refresh).
//
// # Structure: pure rendering, I/O only in the handler
//
// The renderers (LineChart, DotPlot, Heatmap, NextSteps, FunnelChart,
// ControlChart), the adapters from query answers (ShiftSeries, ModelDots,
// TransitionGrid, NextStepsFrom, FunnelBars, ControlFrom, Zoom), Build (answers →
// page) and Render (page → HTML) do no I/O and read no clock: the same input
// gives the same bytes. NewHandler's handler is the only part that does
// I/O: it opens a querier per request, asks it (Fetch), builds and writes
// the page.
//
// # Invariants
//
//   - Every number a chart carries in a data attribute is the query answer's
//     number, unrounded (shortest round-trip float formatting): data-value on
//     each point, dot plot mark and ring, heatmap cell, next-step cell and
//     row, and funnel step;
//     data-values (space-separated, in time order) and data-first on the
//     control chart's lines; data-opened and data-closed on alert bands. A
//     next-step cell's share is the action transition's row probability.
//   - All text from the data (channel, campaign, action and model names)
//     passes through XML escaping (encoding/xml.EscapeText) in the SVG and
//     html/template escaping in the page, so no name can add markup.
//   - A failed query replaces only its own chart with the error.
//   - At most len(Palette) channels are drawn on their own; beyond that the
//     channels with least credit are summed into OtherChannel. Kept channels
//     are coloured in name order, so colours stay put between reloads while
//     the set of channels does not change.
//
// # Methods and sources
//
// Axis ticks are Heckbert's "loose labelling" with nice numbers {1, 2, 5,
// 10}×10^k (P. Heckbert, "Nice numbers for graph labels", Graphics Gems,
// 1990): range = nice(hi − lo), step = nice(range/(n − 1), rounded), ticks
// from ⌊lo/step⌋·step to ⌈hi/step⌉·step. Categorical colours are the eight
// of Okabe & Ito, "Color Universal Design" (2008), chosen to stay apart
// under common colour-vision deficiencies. The heatmap's ramp is ColorBrewer
// "Blues" (5 classes, Brewer, colorbrewer2.org), one hue with falling
// lightness; the text on each cell is black or white, whichever has the
// higher WCAG 2.x contrast ratio (L1 + 0.05)/(L2 + 0.05) with relative
// luminance L = 0.2126 R + 0.7152 G + 0.0722 B of linearised sRGB (W3C,
// WCAG 2.1), which always reaches 4.5:1. The control chart draws the EWMA
// chart computed by package alert (Roberts 1959; NIST/SEMATECH e-Handbook
// §6.3.2.4) as the query answers give it.
package dashboard
