/**
 * The decision report: one self-contained HTML file for a mark on a tag, for the person who decides
 * whether to keep (or pay for) the change. Inline CSS, inline SVG, no script and no link to
 * anything outside the file, so it opens offline, prints as it looks, and can be filed with the
 * management-of-change record.
 */

import type { Verdict } from '@trueshift/stats';
import type { Figures } from './figures.js';
import {
  escapeHtml,
  formatNumber,
  formatPercent,
  formatSigned,
  formatTime,
  withUnit,
} from './format.js';
import {
  comparisonSvg,
  cusumSvg,
  ewmaSvg,
  PALETTE,
  referenceSvg,
  riskPathSvg,
  runChartSvg,
} from './svg.js';

export interface ReportOptions {
  /** The project's caution, printed at the top and the bottom. */
  caution: string;
  generatedAt: number;
}

/** A shape beside the verdict so it reads without colour. */
const VERDICT_SIGN: Readonly<Record<Verdict, string>> = {
  'credible-rise': '▲',
  'credible-fall': '▼',
  'credible-but-small': '◆',
  'still-gathering': '…',
  'no-credible-shift': '○',
  'not-enough-history': '!',
};

const VERDICT_TONE: Readonly<Record<Verdict, string>> = {
  'credible-rise': 'credible',
  'credible-fall': 'credible',
  'credible-but-small': 'credible',
  'still-gathering': 'open',
  'no-credible-shift': 'none',
  'not-enough-history': 'open',
};

const STYLE = `
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: ${PALETTE.ink}; background: #f4f6f9; }
main { max-width: 900px; margin: 0 auto; padding: 24px 20px 48px; background: #fff; }
h1 { font-size: 1.6rem; margin: 0 0 4px; }
h2 { font-size: 1.2rem; margin: 32px 0 8px; padding-bottom: 4px; border-bottom: 2px solid ${PALETTE.grid}; }
h3 { font-size: 1rem; margin: 20px 0 4px; }
.sub { color: ${PALETTE.muted}; margin: 0 0 16px; }
.caution { border: 2px solid ${PALETTE.limit}; border-left-width: 8px; background: #fdf3f4; padding: 10px 14px; margin: 16px 0; font-weight: 600; }
.caution::before { content: "⚠ "; }
.question { font-size: 1.15rem; font-style: italic; margin: 8px 0; }
.verdict { display: flex; gap: 14px; align-items: flex-start; border: 2px solid ${PALETTE.ink}; padding: 12px 16px; margin: 12px 0; }
.verdict .sign { font-size: 2rem; line-height: 1; }
.verdict.credible { border-color: ${PALETTE.before}; background: #eef4f9; }
.verdict.open { border-style: dashed; }
.verdict .title { font-size: 1.25rem; font-weight: 700; display: block; }
dl.keys { display: grid; grid-template-columns: max-content 1fr; gap: 4px 16px; margin: 8px 0; }
dl.keys dt { font-weight: 600; }
dl.keys dd { margin: 0; }
table { border-collapse: collapse; width: 100%; margin: 8px 0; }
th, td { text-align: left; vertical-align: top; padding: 6px 8px; border-bottom: 1px solid ${PALETTE.grid}; }
th { width: 34%; font-weight: 600; }
figure { margin: 20px 0; break-inside: avoid; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; display: block; }
figcaption { color: ${PALETTE.muted}; font-size: 0.92rem; margin-top: 4px; }
.method { break-inside: avoid; }
.method p { margin: 4px 0; }
.assume { margin: 4px 0 0 0; padding-left: 20px; }
footer { margin-top: 32px; color: ${PALETTE.muted}; font-size: 0.85rem; }
@media (max-width: 700px) { th { width: auto; } dl.keys { grid-template-columns: 1fr; } }
@page { size: A4; margin: 14mm; }
@media print {
  body { background: #fff; font-size: 11pt; }
  main { max-width: none; padding: 0; }
  .caution, .verdict { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  h2 { break-after: avoid; }
}
`;

function direction(d: string): string {
  return d === 'rise' ? 'a rise' : d === 'fall' ? 'a fall' : 'a shift either way';
}

function figure(svg: string, caption: string): string {
  if (svg === '') return '';
  return `<figure>${svg}<figcaption>${escapeHtml(caption)}</figcaption></figure>`;
}

function keyNumbers(f: Figures): string {
  const e = f.evidence;
  const unit = f.tag.unit;
  const rows: [string, string][] = [];
  if (e !== null) {
    rows.push(['Observed shift', withUnit(formatSigned(e.observedShift), unit)]);
    if (e.welch !== null) {
      rows.push([
        `Likely range (${formatPercent(e.welch.confidence ?? 1 - e.riskLevel)})`,
        withUnit(`${formatSigned(e.welch.ciLower)} to ${formatSigned(e.welch.ciUpper)}`, unit),
      ]);
    }
    rows.push([
      'Risk of being wrong',
      e.reference.status === 'ok'
        ? `${e.reference.countAtLeast === 0 ? `less than ${formatPercent(1 / Math.max(1, e.reference.m))}` : formatPercent(e.reference.risk)} (chosen level ${formatPercent(e.riskLevel)})`
        : 'not known: the history is too short',
    ]);
    const more = e.samplesNeeded;
    rows.push([
      'Samples still needed',
      more === null
        ? '–'
        : more.status === 'reached'
          ? 'none'
          : more.status === 'reachable'
            ? `about ${more.more ?? '?'}`
            : 'more samples are not expected to decide it',
    ]);
  }
  if (rows.length === 0) return '';
  return `<dl class="keys">${rows.map(([k, v]) => `<dt>${escapeHtml(k)}</dt><dd>${escapeHtml(v)}</dd>`).join('')}</dl>`;
}

function windowTable(f: Figures): string {
  const w = f.window;
  const rows: [string, string][] = [
    ['Tag', f.tag.description === null ? f.tag.name : `${f.tag.name}: ${f.tag.description}`],
    [
      'Change',
      `“${f.mark.label}” at ${formatTime(f.mark.at)}, looking for ${direction(f.mark.direction)}`,
    ],
    ['Values analysed', f.basis === 'batch' ? 'one value per batch or sample' : f.basis],
    [
      'History before the change',
      `${w.nHistory} values (in control, settling periods of earlier changes left out)`,
    ],
    [
      'Before-window',
      `the last ${w.nBefore} values before the change${w.beforeStart === null ? '' : `, from ${formatTime(w.beforeStart)}`}`,
    ],
    [
      'After-window',
      `${w.nAfter} values, from ${formatTime(w.markAt)} to ${formatTime(w.afterEnd)}`,
    ],
    ['Historical differences', `${w.m} (each an after-window mean less its before-window mean)`],
    ['Evaluated', formatTime(f.evaluatedAt)],
  ];
  if (f.mark.note.trim() !== '') rows.splice(2, 0, ['Note on the change', f.mark.note]);
  return table(rows);
}

function table(rows: readonly (readonly [string, string])[]): string {
  return `<table><tbody>${rows.map(([k, v]) => `<tr><th scope="row">${escapeHtml(k)}</th><td>${escapeHtml(v)}</td></tr>`).join('')}</tbody></table>`;
}

interface Method {
  name: string;
  plain: string;
  assumes: string[];
}

function methods(f: Figures): Method[] {
  const e = f.evidence;
  const nA = e?.nBefore ?? f.window.nBefore;
  const nB = e?.nAfter ?? f.window.nAfter;
  return [
    {
      name: 'The reference distribution (the main answer)',
      plain: `We slide two windows along the tag's own history before the change: ${nA} values, then the ${nB} after them, and note the difference of their means each time. That gives ${f.window.m} differences the plant produced by itself, with nothing changed. The share of them at least as large as the shift seen after the change is the risk of being wrong if we call the shift real.`,
      assumes: [
        'The history is the same process running as usual: no other change, campaign or fault inside it (earlier marks’ settling periods are left out).',
        'Had nothing been changed, the period after the change would have looked like that history.',
        'Nothing else changed at the same moment; the method cannot tell two simultaneous changes apart.',
        `It needs no normal distribution and no independence between samples; it needs at least ${e?.reference.minimumM ?? '1 / risk level'} differences to resolve the chosen risk level.`,
      ],
    },
    {
      name: "Welch's t test (a cross-check)",
      plain:
        'Compares the before-window and after-window means against how much each window scatters, allowing the two to scatter differently, and gives a confidence interval for the shift.',
      assumes: [
        'Samples are independent of one another.',
        'Each window’s mean is roughly normally distributed (true for near-normal data or enough samples).',
        'When the history shows lag-1 autocorrelation beyond 2/√N, the test is repeated with effective sample sizes and the reference distribution should be trusted over it.',
      ],
    },
    {
      name: 'CUSUM',
      plain:
        'Adds up, sample by sample, how far each value after the change lies from the history’s mean (in σ units, less a slack k). A sum above the decision limit h says the level moved; where the sum last stood at zero estimates when.',
      assumes: [
        'The history’s mean and σ (from the median moving range) describe the process before the change.',
        'Samples are roughly independent; autocorrelation makes it signal too often.',
        'It looks for a lasting step, not a slow drift or a single odd value.',
      ],
    },
    {
      name: 'EWMA',
      plain:
        'A running average that weights recent values more (weight λ); it leaves its limits when the level has moved by more than the noise explains.',
      assumes: [
        'The same baseline mean and σ as the CUSUM.',
        'Roughly independent samples; it is good at small lasting shifts, slow at sudden large ones.',
      ],
    },
    {
      name: 'Samples still needed',
      plain:
        'The smallest after-window for which the history’s own differences would rarely (at the chosen risk level) be as large as the shift seen so far.',
      assumes: [
        'The shift seen so far is the real one and stays as it is.',
        'The process keeps the noise it showed in its history.',
      ],
    },
  ];
}

function methodSection(f: Figures): string {
  return methods(f)
    .map(
      (m) =>
        `<div class="method"><h3>${escapeHtml(m.name)}</h3><p>${escapeHtml(m.plain)}</p><p><strong>It assumes:</strong></p><ul class="assume">${m.assumes.map((a) => `<li>${escapeHtml(a)}</li>`).join('')}</ul></div>`,
    )
    .join('');
}

function referenceCaption(f: Figures): string {
  const ref = f.reference;
  if (ref === null) return '';
  const share = ref.m > 0 ? ref.beyond / ref.m : 0;
  return `Each dot is one difference the history produced by itself (${ref.m} in all). The line is the shift observed after the change: ${ref.beyond} of ${ref.m} (${formatPercent(share)}) lie at it or beyond, in the direction looked for.`;
}

/** The whole report as one HTML document. */
export function buildDecisionReport(f: Figures, options: ReportOptions): string {
  const caution = escapeHtml(options.caution);
  const e = f.evidence;
  const title = `Decision report: ${f.tag.name} after “${f.mark.label}”`;
  const ac = e?.autocorrelation;
  const acNote =
    ac?.flagged === true
      ? `<p><strong>Autocorrelation warning:</strong> ${escapeHtml(ac.note)}</p>`
      : '';
  const body = [
    `<header><h1>${escapeHtml(title)}</h1><p class="sub">trueshift decision report · evaluated ${escapeHtml(formatTime(f.evaluatedAt))} · written ${escapeHtml(formatTime(options.generatedAt))}</p></header>`,
    `<p class="caution" role="note">${caution}</p>`,
    '<section><h2>The question</h2>',
    `<p class="question">${escapeHtml(f.question)}</p>`,
    '</section>',
    '<section><h2>The answer</h2>',
    `<div class="verdict ${VERDICT_TONE[f.verdict]}"><span class="sign" aria-hidden="true">${VERDICT_SIGN[f.verdict]}</span><div><span class="title">${escapeHtml(f.verdictTitle)}</span>${escapeHtml(f.verdictText)}</div></div>`,
    keyNumbers(f),
    acNote,
    '</section>',
    '<section><h2>The data</h2>',
    windowTable(f),
    '</section>',
    '<section><h2>The pictures</h2>',
    figure(
      runChartSvg(f),
      `The tag's samples around the change (vertical line), with the mean before (${formatNumber(f.comparison.beforeMean)}) and after (${formatNumber(f.comparison.afterMean)}).`,
    ),
    figure(referenceSvg(f), referenceCaption(f)),
    figure(
      riskPathSvg(f),
      'How the risk of being wrong moved as samples came in after the change, against the chosen risk level.',
    ),
    figure(
      comparisonSvg(f),
      'Every value of the before-window and of the after-window, with their means: the spread shows how much of the shift is noise.',
    ),
    figure(
      cusumSvg(f),
      'The CUSUM of the values after the change against its decision limit, with the estimated start of the shift.',
    ),
    figure(ewmaSvg(f), 'The EWMA of the values after the change with its limits.'),
    '</section>',
    '<section><h2>The numbers</h2>',
    table(f.table.map((r) => [r.label, r.value] as const)),
    '</section>',
    '<section><h2>How the evidence is weighed</h2>',
    methodSection(f),
    '</section>',
    '<section><h2>What this report does not tell you</h2>',
    '<p>Whether the change caused the shift (rather than something that changed at the same time), whether it will last, whether it is safe, and whether it is worth its cost. Those are for the people who know the plant.</p>',
    `<p class="caution" role="note">${caution}</p>`,
    '</section>',
    `<footer>Mark ${escapeHtml(f.mark.id)} on ${escapeHtml(f.tag.name)}. This file is complete in itself: it needs no network and no other file.</footer>`,
  ].join('\n');
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${escapeHtml(title)}</title>
<style>${STYLE}</style>
</head>
<body>
<main>
${body}
</main>
</body>
</html>
`;
}
