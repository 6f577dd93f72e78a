// A tag's view: the evidence of a mark in pictures and numbers, its alerts, and the forms to mark
// a change and set the risk level.

import { api, tagSegment } from './api.js';
import {
  clearChart,
  comparisonChart,
  cusumChart,
  ewmaChart,
  referenceChart,
  riskPathChart,
  runChart,
} from './charts.js';
import { el, localInputValue, num, pct, signed, stateBadge, time } from './format.js';

const VERDICT_SIGN = {
  'credible-rise': '▲',
  'credible-fall': '▼',
  'credible-but-small': '◆',
  'still-gathering': '…',
  'no-credible-shift': '○',
  'not-enough-history': '!',
};
const VERDICT_TONE = {
  'credible-rise': 'credible',
  'credible-fall': 'credible',
  'credible-but-small': 'credible',
  'still-gathering': 'open',
  'not-enough-history': 'open',
  'no-credible-shift': 'none',
};
const ALERT_STATE_TEXT = { open: 'Open', acknowledged: 'Acknowledged', cleared: 'Cleared' };

function figureBox(id, title, wide = false) {
  const area = el('div', { class: 'plot-area', id: `chart-${id}` });
  const caption = el('figcaption', { id: `caption-${id}` });
  const box = el(
    'figure',
    {
      class: `chart${wide ? ' wide' : ''}`,
      'aria-labelledby': `title-${id}`,
      'aria-describedby': `caption-${id}`,
    },
    el('h3', { id: `title-${id}`, text: title }),
    area,
    caption,
  );
  return { box, area, caption };
}

export function renderTag(ctx, name) {
  const seg = tagSegment(name);
  const params = new URLSearchParams(location.search);
  const view = { tag: null, marks: [], alerts: [], selected: params.get('mark'), figures: null };
  let timer = null;
  let loading = null;

  const title = el('h1', { text: name });
  const description = el('p', { class: 'muted' });
  const markSelect = el('select', { id: 'mark-select' });
  const verdictBox = el('div', { id: 'verdict', 'aria-live': 'polite' });
  const reportButtons = el('div', { class: 'actions' });
  const figures = {
    run: figureBox('run', 'Run chart', true),
    reference: figureBox('reference', 'Reference distribution: what the history does by itself'),
    path: figureBox('path', 'Risk since the change'),
    comparison: figureBox('comparison', 'Before and after, every value'),
    cusum: figureBox('cusum', 'CUSUM since the change'),
    ewma: figureBox('ewma', 'EWMA since the change'),
  };
  const charts = el(
    'div',
    { class: 'charts' },
    Object.values(figures).map((f) => f.box),
  );
  const summary = el('div', { class: 'table-wrap', id: 'summary' });
  const alertList = el('ul', { class: 'alerts', id: 'alerts' });

  // Mark a change.
  const markForm = el(
    'form',
    { id: 'mark-form', 'aria-labelledby': 'mark-form-title' },
    el('h2', { id: 'mark-form-title', text: 'Mark a change on this tag' }),
    el(
      'div',
      { class: 'row' },
      el(
        'div',
        {},
        el('label', { for: 'mark-label', text: 'What changed' }),
        el('input', {
          id: 'mark-label',
          name: 'label',
          required: true,
          maxlength: 200,
          placeholder: 'e.g. new steam trap',
        }),
      ),
      el(
        'div',
        {},
        el('label', { for: 'mark-at', text: 'When it went live' }),
        el('input', {
          id: 'mark-at',
          name: 'at',
          type: 'datetime-local',
          required: true,
          value: localInputValue(Date.now()),
        }),
      ),
    ),
    el(
      'div',
      { class: 'row' },
      el(
        'div',
        {},
        el('label', { for: 'mark-direction', text: 'Looking for' }),
        el(
          'select',
          { id: 'mark-direction', name: 'direction' },
          el('option', { value: 'either', text: 'a shift either way' }),
          el('option', { value: 'rise', text: 'a rise' }),
          el('option', { value: 'fall', text: 'a fall' }),
        ),
      ),
      el(
        'div',
        {},
        el('label', { for: 'mark-smallest', text: 'Smallest shift worth having (optional)' }),
        el('input', {
          id: 'mark-smallest',
          name: 'smallestShift',
          type: 'number',
          step: 'any',
          min: '0',
        }),
      ),
    ),
    el('label', { for: 'mark-note', text: 'Note (optional)' }),
    el('textarea', { id: 'mark-note', name: 'note', rows: 2, maxlength: 4000 }),
    el('div', { class: 'actions' }, el('button', { type: 'submit', text: 'Mark the change' })),
  );
  markForm.addEventListener('submit', async (event) => {
    event.preventDefault();
    const data = new FormData(markForm);
    const at = new Date(String(data.get('at'))).getTime();
    const smallest = String(data.get('smallestShift') ?? '').trim();
    const body = {
      tags: [name],
      at,
      label: String(data.get('label')).trim(),
      direction: String(data.get('direction')),
      note: String(data.get('note') ?? ''),
      ...(smallest === '' ? {} : { smallestShift: Number(smallest) }),
    };
    if (!Number.isFinite(at)) return ctx.notice('Give the moment of the change.');
    const done = await ctx.write(() => api('/api/v1/marks', { method: 'POST', body }));
    if (done === undefined) return;
    view.selected = done.id;
    history.replaceState(null, '', `/tags/${seg}?mark=${encodeURIComponent(done.id)}`);
    ctx.notice(
      `Marked “${done.label}”. Its evidence appears here as samples after it are analysed.`,
      'ok',
    );
    markForm.reset();
    markForm.querySelector('#mark-at').value = localInputValue(Date.now());
    load();
  });

  // The tag's risk level.
  const riskInput = el('input', {
    id: 'risk-level',
    name: 'riskLevel',
    type: 'number',
    min: '0.1',
    max: '50',
    step: '0.1',
    required: true,
  });
  const riskForm = el(
    'form',
    { id: 'risk-form', 'aria-labelledby': 'risk-form-title' },
    el('h2', { id: 'risk-form-title', text: 'Risk level for this tag' }),
    el('p', {
      class: 'muted',
      text: 'The risk of being wrong you accept before a shift counts as credible. Marks that set their own keep it.',
    }),
    el('label', { for: 'risk-level', text: 'Risk level (%)' }),
    riskInput,
    el('div', { class: 'actions' }, el('button', { type: 'submit', text: 'Set the risk level' })),
  );
  riskForm.addEventListener('submit', async (event) => {
    event.preventDefault();
    const value = Number(riskInput.value) / 100;
    const done = await ctx.write(() =>
      api(`/api/v1/tags/${seg}`, { method: 'PATCH', body: { settings: { riskLevel: value } } }),
    );
    if (done === undefined) return;
    ctx.notice(
      `The risk level of ${name} is now ${pct(done.settings.riskLevel)}; new evaluations use it.`,
      'ok',
    );
    load();
  });

  ctx.main.replaceChildren(
    title,
    description,
    el(
      'section',
      { class: 'panel', 'aria-labelledby': 'evidence-title' },
      el('h2', { id: 'evidence-title', text: 'Evidence' }),
      el(
        'div',
        { class: 'controls' },
        el('div', {}, el('label', { for: 'mark-select', text: 'Change' }), markSelect),
      ),
      verdictBox,
      reportButtons,
    ),
    charts,
    el(
      'section',
      { class: 'panel', 'aria-labelledby': 'summary-title' },
      el('h2', { id: 'summary-title', text: 'The numbers' }),
      summary,
    ),
    el(
      'section',
      { class: 'panel', 'aria-labelledby': 'alerts-title' },
      el('h2', { id: 'alerts-title', text: 'Alerts on this tag' }),
      alertList,
    ),
    el(
      'div',
      { class: 'forms' },
      el('section', { class: 'panel' }, markForm),
      el('section', { class: 'panel' }, riskForm),
    ),
  );
  ctx.setCrumbs([{ text: name }]);

  markSelect.addEventListener('change', () => {
    view.selected = markSelect.value;
    history.replaceState(null, '', `/tags/${seg}?mark=${encodeURIComponent(view.selected)}`);
    load();
  });

  function drawMarks() {
    markSelect.replaceChildren(
      ...(view.marks.length === 0
        ? [el('option', { value: '', text: 'No change marked yet' })]
        : view.marks.map(({ mark }) =>
            el('option', {
              value: mark.id,
              selected: mark.id === view.selected,
              text: `${mark.label} (${time(mark.at)})`,
            }),
          )),
    );
    markSelect.disabled = view.marks.length === 0;
  }

  function drawVerdict(entry) {
    const f = view.figures;
    if (entry === undefined) {
      verdictBox.replaceChildren(
        el('p', { text: 'No change is marked on this tag. Mark one below to gather evidence.' }),
      );
      reportButtons.replaceChildren();
      return;
    }
    if (f === null) {
      verdictBox.replaceChildren(
        el(
          'div',
          { class: 'verdict tone-open' },
          el('span', { class: 'sign', 'aria-hidden': 'true', text: '…' }),
          el(
            'div',
            {},
            el('span', { class: 'title', text: 'Waiting for samples' }),
            `Nothing after “${entry.mark.label}” has been analysed yet.`,
          ),
        ),
      );
      reportButtons.replaceChildren();
      return;
    }
    const e = f.evidence;
    const keys = [];
    if (e !== null) {
      const unit = f.tag.unit === null ? '' : ` ${f.tag.unit}`;
      keys.push(['Observed shift', `${signed(e.observedShift)}${unit}`]);
      if (e.welch !== null)
        keys.push([
          'Likely range',
          `${signed(e.welch.ciLower)} to ${signed(e.welch.ciUpper)}${unit}`,
        ]);
      const ref = e.reference;
      // None of the history as large: the risk is only known to be below one in M.
      const risk =
        ref.countAtLeast === 0 ? `less than ${pct(1 / Math.max(1, ref.m))}` : pct(ref.risk);
      keys.push([
        'Risk of being wrong',
        ref.status === 'ok' ? `${risk} against ${pct(e.riskLevel)}` : 'not known yet',
      ]);
      const more = e.samplesNeeded;
      keys.push([
        'Samples still needed',
        more === null
          ? '–'
          : more.status === 'reached'
            ? 'none'
            : more.status === 'reachable'
              ? `about ${more.more}`
              : 'more are not expected to decide it',
      ]);
      keys.push(['Samples after the change', String(e.nAfter)]);
    }
    verdictBox.replaceChildren(
      el(
        'div',
        { class: `verdict tone-${VERDICT_TONE[f.verdict] ?? 'none'}`, 'data-verdict': f.verdict },
        el('span', { class: 'sign', 'aria-hidden': 'true', text: VERDICT_SIGN[f.verdict] ?? '•' }),
        el('div', {}, el('span', { class: 'title', text: f.verdictTitle }), f.verdictText),
      ),
      el('p', { class: 'muted', text: f.question }),
      keys.length === 0
        ? null
        : el(
            'dl',
            { class: 'keys' },
            keys.map(([k, v]) => [el('dt', { text: k }), el('dd', { text: v })]),
          ),
    );
    const reportPath = `/api/v1/marks/${encodeURIComponent(f.mark.id)}/report/${seg}?format=html`;
    const fileName = `trueshift-${name.replace(/[^A-Za-z0-9]+/g, '-')}-report.html`;
    const fetchReport = async () => {
      try {
        const html = await api(reportPath, { as: 'text' });
        return URL.createObjectURL(new Blob([html], { type: 'text/html' }));
      } catch (error) {
        ctx.failed(error);
        return null;
      }
    };
    reportButtons.replaceChildren(
      el('button', {
        type: 'button',
        id: 'open-report',
        text: 'Open the decision report',
        onclick: async () => {
          const url = await fetchReport();
          if (url !== null) window.open(url, '_blank', 'noopener');
        },
      }),
      el('button', {
        type: 'button',
        class: 'ghost',
        text: 'Download it (HTML)',
        onclick: async () => {
          const url = await fetchReport();
          if (url === null) return;
          const link = el('a', { href: url, download: fileName });
          document.body.append(link);
          link.click();
          link.remove();
          setTimeout(() => URL.revokeObjectURL(url), 60_000);
        },
      }),
    );
  }

  function drawCharts(samples, entry) {
    const f = view.figures;
    const unit = view.tag?.unit ?? null;
    for (const key of ['reference', 'path', 'comparison', 'cusum', 'ewma'])
      figures[key].box.hidden = f === null;
    if (f === null) {
      const run = {
        t: samples?.samples.t ?? [],
        value: samples?.samples.value ?? [],
        markAt: entry?.mark.at ?? 0,
        before: null,
        after: null,
      };
      runChart(figures.run.area, run, {
        unit,
        markLabel: entry === undefined ? null : entry.mark.label,
      });
      figures.run.caption.textContent = `${run.t.length} samples${samples?.thinned ? ` (thinned from ${samples.total})` : ''}.`;
      summary.replaceChildren(
        el('p', {
          class: 'muted',
          text: 'The numbers appear once samples after a marked change are analysed.',
        }),
      );
      return;
    }
    runChart(figures.run.area, f.run, { unit, markLabel: f.mark.label });
    figures.run.caption.textContent = `${f.run.t.length} samples${f.run.thinned ? ` (thinned from ${f.run.total})` : ''} around “${f.mark.label}” (violet line), with the before mean (dashed) and the after mean.`;
    if (f.reference === null) {
      clearChart(figures.reference.area);
      figures.reference.area.replaceChildren(
        el('p', { text: 'No historical differences yet: the history is too short.' }),
      );
      figures.reference.caption.textContent = '';
    } else {
      const ref = f.reference;
      referenceChart(figures.reference.area, ref, { unit });
      figures.reference.caption.textContent = `${ref.m} historical differences (M = ${ref.m}), one dot each${ref.kind === 'bins' ? ', here in bins' : ''}. ${ref.beyond} of them (${pct(ref.m > 0 ? ref.beyond / ref.m : 0)}) are at least as extreme as the observed ${num(ref.observed)}: filled dots.`;
    }
    riskPathChart(figures.path.area, f.path);
    const p = f.path.projection;
    figures.path.caption.textContent = `The risk after each of ${f.path.nAfter.length} evaluations against the risk level of ${pct(f.path.riskLevel)}. ${
      p === null
        ? ''
        : p.status === 'reached'
          ? 'The risk level is reached.'
          : p.status === 'reachable'
            ? `If the shift is real, about ${p.more} more samples should be enough (n = ${p.nAfter}).`
            : `More samples are not expected to reach it: ${p.reason ?? ''}`
    }`;
    comparisonChart(figures.comparison.area, f.comparison, { unit });
    figures.comparison.caption.textContent = `${f.comparison.before.length} values before (hollow) and ${f.comparison.after.length} after the change (filled), with their means.`;
    if (f.cusum !== null) {
      cusumChart(figures.cusum.area, f.cusum);
      figures.cusum.caption.textContent = `${f.cusum.signalAt === null ? 'No signal' : `First signal at sample ${f.cusum.signalAt}`}; ${f.cusum.changePoint === null ? 'no change point estimated' : f.cusum.changePoint === 0 ? 'the shift is estimated to start right at the change' : `the shift is estimated to start after sample ${f.cusum.changePoint}`}.`;
    }
    figures.cusum.box.hidden = f.cusum === null;
    if (f.ewma !== null) {
      ewmaChart(figures.ewma.area, f.ewma, { unit });
      figures.ewma.caption.textContent =
        f.ewma.signalAt === null
          ? 'The EWMA stays inside its limits.'
          : `The EWMA leaves its limits at sample ${f.ewma.signalAt}.`;
    }
    figures.ewma.box.hidden = f.ewma === null;
    summary.replaceChildren(
      el(
        'table',
        { id: 'summary-table' },
        el(
          'tbody',
          {},
          f.table.map((row) =>
            el(
              'tr',
              {},
              el('th', { scope: 'row', text: row.label }),
              el('td', { text: row.value }),
            ),
          ),
        ),
      ),
    );
  }

  function drawAlerts() {
    const live = view.alerts.filter((a) => a.state !== 'cleared');
    if (live.length === 0) {
      alertList.replaceChildren(
        el('li', { class: 'muted', text: 'No alert is open on this tag.' }),
      );
      return;
    }
    alertList.replaceChildren(
      ...live.map((alert) => {
        const note = el('input', {
          id: `ack-note-${alert.id}`,
          maxlength: 2000,
          placeholder: 'what was found or done',
          'aria-label': 'Note for the acknowledgement',
        });
        const item = el(
          'li',
          { 'data-alert': alert.id, 'data-state': alert.state },
          el(
            'div',
            {},
            stateBadge(
              alert.state === 'open' ? 'alert-open' : 'watching',
              ALERT_STATE_TEXT[alert.state] ?? alert.state,
            ),
            ' ',
            el('strong', { text: alert.title }),
          ),
          el('div', {
            class: 'muted',
            text: `${alert.kind.replace(/-/g, ' ')}, opened ${time(alert.openedAt)}${alert.repeats > 0 ? `, seen ${alert.repeats} more times` : ''}${alert.acknowledgedBy ? `; acknowledged by ${alert.acknowledgedBy}: ${alert.note ?? ''}` : ''}`,
          }),
        );
        const actions = el('div', { class: 'actions' });
        if (alert.state === 'open') {
          actions.append(
            note,
            el('button', {
              type: 'button',
              class: 'acknowledge',
              text: 'Acknowledge',
              onclick: async () => {
                if (note.value.trim() === '') {
                  note.focus();
                  return ctx.notice('Say in a few words what was found or done, then acknowledge.');
                }
                const done = await ctx.write(() =>
                  api(`/api/v1/alerts/${alert.id}/acknowledge`, {
                    method: 'POST',
                    body: { note: note.value.trim() },
                  }),
                );
                if (done !== undefined) {
                  ctx.notice('Alert acknowledged.', 'ok');
                  load();
                }
              },
            }),
          );
        }
        actions.append(
          el('button', {
            type: 'button',
            class: 'ghost clear',
            text: 'Clear',
            onclick: async () => {
              const done = await ctx.write(() =>
                api(`/api/v1/alerts/${alert.id}/clear`, { method: 'POST' }),
              );
              if (done !== undefined) {
                ctx.notice('Alert cleared.', 'ok');
                load();
              }
            },
          }),
        );
        item.append(actions);
        return item;
      }),
    );
  }

  async function loadOnce() {
    try {
      const [tag, evidence, alerts] = await Promise.all([
        api(`/api/v1/tags/${seg}`),
        api(`/api/v1/tags/${seg}/evidence`),
        api(`/api/v1/alerts?tag=${encodeURIComponent(name)}&limit=100`),
      ]);
      view.tag = tag;
      view.marks = [...evidence.marks].sort((a, b) => b.mark.at - a.mark.at);
      view.alerts = alerts.alerts;
      if (!view.marks.some((m) => m.mark.id === view.selected))
        view.selected = view.marks[0]?.mark.id ?? null;
      const entry = view.marks.find((m) => m.mark.id === view.selected);
      view.figures = null;
      let samples = null;
      if (entry?.evidence) {
        const answer = await api(
          `/api/v1/marks/${encodeURIComponent(entry.mark.id)}/report/${seg}?format=json`,
        );
        view.figures = answer.figures;
      } else {
        samples = await api(`/api/v1/tags/${seg}/samples?thin=1500`);
      }
      title.textContent = name;
      description.textContent = [tag.description, tag.unit === null ? null : `unit: ${tag.unit}`]
        .filter(Boolean)
        .join(' · ');
      if (document.activeElement !== riskInput) {
        const level = tag.settings.riskLevel ?? view.figures?.evidence?.riskLevel ?? 0.05;
        riskInput.value = String(Number((level * 100).toPrecision(3)));
      }
      drawMarks();
      drawVerdict(entry);
      drawCharts(samples, entry);
      drawAlerts();
      ctx.main.dataset.loaded = String(Date.now());
    } catch (error) {
      ctx.failed(error);
    }
  }

  // One load at a time; a request for another while one runs queues exactly one more.
  let again = false;
  function load() {
    if (loading !== null) {
      again = true;
      return loading;
    }
    loading = loadOnce().finally(() => {
      loading = null;
      if (again) {
        again = false;
        load();
      }
    });
    return loading;
  }

  load();

  return {
    onEvent(event) {
      const d = event.data ?? {};
      const concerns =
        event.kind === 'reload' ||
        (event.kind === 'evidence' && d.tag === name) ||
        (event.kind === 'alert' && d.alert?.tag === name) ||
        (event.kind === 'mark' && Array.isArray(d.mark?.tags) && d.mark.tags.includes(name));
      if (!concerns) return;
      clearTimeout(timer);
      timer = setTimeout(load, 250);
    },
    reload: load,
    destroy() {
      clearTimeout(timer);
    },
  };
}
