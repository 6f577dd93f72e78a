// The overview: every tag's state at a glance, sortable and filterable, refreshed by live events.

import { api, tagSegment } from './api.js';
import { el, num, pct, stateBadge, time } from './format.js';

const STATES = [
  ['data-problem', 'Data problem'],
  ['alert-open', 'Alert open'],
  ['credible-shift', 'Credible shift'],
  ['gathering', 'Gathering evidence'],
  ['watching', 'Watching'],
];
const RANK = Object.fromEntries(STATES.map(([state], i) => [state, i]));

const COLUMNS = [
  { key: 'name', label: 'Tag', value: (r) => r.name.toLowerCase() },
  { key: 'state', label: 'State', value: (r) => RANK[r.state] ?? 9 },
  { key: 'detail', label: 'Why', value: (r) => r.detail.toLowerCase(), hide: 'narrow' },
  { key: 'value', label: 'Latest value', value: (r) => r.lastSample?.value ?? -Infinity },
  { key: 'time', label: 'Last sample', value: (r) => r.lastSample?.t ?? -Infinity, hide: 'medium' },
  { key: 'risk', label: 'Risk level', value: (r) => r.riskLevel },
];

const SORT_KEY = 'trueshift.overview.sort';

export function renderOverview(ctx) {
  const saved = JSON.parse(sessionStorage.getItem(SORT_KEY) ?? 'null');
  const view = { rows: [], sort: saved ?? { key: 'state', dir: 1 }, filter: '', state: '' };
  let timer = null;

  const filterInput = el('input', {
    id: 'filter',
    type: 'search',
    placeholder: 'name or description',
    oninput: () => {
      view.filter = filterInput.value.trim().toLowerCase();
      drawRows();
    },
  });
  const stateSelect = el(
    'select',
    {
      id: 'state-filter',
      onchange: () => {
        view.state = stateSelect.value;
        drawRows();
      },
    },
    el('option', { value: '', text: 'All states' }),
    STATES.map(([value, text]) => el('option', { value, text })),
  );
  const summary = el('ul', { class: 'summary', 'aria-label': 'Tags in each state' });
  const head = el('tr');
  const body = el('tbody');
  const count = el('p', { class: 'muted', id: 'row-count', 'aria-live': 'polite' });
  const table = el(
    'table',
    { id: 'tags' },
    el('caption', {
      class: 'muted',
      text: 'Tags, with the most urgent first unless sorted otherwise',
    }),
    el('thead', {}, head),
    body,
  );

  ctx.main.replaceChildren(
    el('h1', { text: 'All tags' }),
    summary,
    el(
      'div',
      { class: 'panel' },
      el(
        'div',
        { class: 'controls' },
        el('div', {}, el('label', { for: 'filter', text: 'Filter' }), filterInput),
        el('div', {}, el('label', { for: 'state-filter', text: 'State' }), stateSelect),
      ),
      count,
      el('div', { class: 'table-wrap' }, table),
    ),
  );
  ctx.setCrumbs([]);

  function drawHead() {
    head.replaceChildren(
      ...COLUMNS.map((column) => {
        const sorted = view.sort.key === column.key;
        return el(
          'th',
          {
            scope: 'col',
            class: column.hide === undefined ? null : `hide-${column.hide}`,
            'aria-sort': sorted ? (view.sort.dir > 0 ? 'ascending' : 'descending') : 'none',
          },
          el('button', {
            type: 'button',
            'data-sort': column.key,
            text: column.label,
            onclick: () => {
              view.sort = {
                key: column.key,
                dir: view.sort.key === column.key ? -view.sort.dir : 1,
              };
              sessionStorage.setItem(SORT_KEY, JSON.stringify(view.sort));
              drawHead();
              drawRows();
            },
          }),
        );
      }),
    );
  }

  function visible() {
    const column = COLUMNS.find((c) => c.key === view.sort.key) ?? COLUMNS[1];
    return view.rows
      .filter((r) => view.state === '' || r.state === view.state)
      .filter(
        (r) =>
          view.filter === '' ||
          r.name.toLowerCase().includes(view.filter) ||
          (r.description ?? '').toLowerCase().includes(view.filter),
      )
      .sort((a, b) => {
        const x = column.value(a);
        const y = column.value(b);
        const order = x < y ? -1 : x > y ? 1 : 0;
        return order * view.sort.dir || a.name.localeCompare(b.name);
      });
  }

  function drawRows() {
    const rows = visible();
    body.replaceChildren(
      ...rows.map((r) =>
        el(
          'tr',
          { 'data-tag': r.name },
          el(
            'td',
            {},
            el('a', { href: `/tags/${tagSegment(r.name)}`, 'data-nav': true, text: r.name }),
            r.description === null ? null : el('div', { class: 'muted', text: r.description }),
          ),
          el('td', { class: 'state-cell' }, stateBadge(r.state, r.stateText)),
          el('td', { class: 'hide-narrow', text: r.detail }),
          el('td', {
            class: 'num',
            text:
              r.lastSample === null
                ? '–'
                : `${num(r.lastSample.value)}${r.unit === null ? '' : ` ${r.unit}`}`,
          }),
          el('td', { class: 'num hide-medium', text: time(r.lastSample?.t) }),
          el('td', { class: 'num', text: pct(r.riskLevel) }),
        ),
      ),
    );
    count.textContent =
      rows.length === view.rows.length
        ? `${rows.length} tags`
        : `${rows.length} of ${view.rows.length} tags shown`;
  }

  function drawSummary() {
    summary.replaceChildren(
      ...STATES.map(([state, text]) => {
        const n = view.rows.filter((r) => r.state === state).length;
        return el('li', { 'data-state': state }, stateBadge(state, `${n} ${text.toLowerCase()}`));
      }),
    );
  }

  async function load() {
    try {
      const answer = await api('/api/v1/overview');
      view.rows = answer.tags;
      ctx.clearNotice();
    } catch (error) {
      ctx.failed(error);
    }
    drawSummary();
    drawRows();
  }

  drawHead();
  load();

  return {
    onEvent(event) {
      if (!['alert', 'evidence', 'mark', 'reload'].includes(event.kind)) return;
      // Bursts of evidence (one per analysed sample) become one reload.
      clearTimeout(timer);
      timer = setTimeout(load, 250);
    },
    reload: load,
    destroy() {
      clearTimeout(timer);
    },
  };
}
