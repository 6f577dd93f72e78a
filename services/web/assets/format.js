// Numbers and times as the page shows them: significant figures, true minus signs, local time.

export function num(x, digits = 4) {
  if (x === null || x === undefined || Number.isNaN(x)) return '–';
  if (!Number.isFinite(x)) return x > 0 ? '∞' : '−∞';
  if (x === 0) return '0';
  const magnitude = Math.abs(x);
  const text =
    magnitude >= 1e-4 && magnitude < 1e9
      ? Number(x.toPrecision(digits)).toString()
      : x.toExponential(digits - 1);
  return text.replace(/^-/, '−');
}

export function signed(x, digits = 4) {
  if (x === null || x === undefined || Number.isNaN(x)) return '–';
  return x > 0 ? `+${num(x, digits)}` : num(x, digits);
}

export function pct(share) {
  if (share === null || share === undefined || Number.isNaN(share)) return '–';
  if (share === 0) return '0%';
  const p = share * 100;
  return `${p >= 10 ? Number(p.toFixed(1)) : Number(p.toPrecision(2))}%`;
}

const pad = (n) => String(n).padStart(2, '0');

export function time(ms) {
  if (ms === null || ms === undefined || !Number.isFinite(ms)) return '–';
  const d = new Date(ms);
  return `${d.getFullYear()}-${pad(d.getMonth() + 1)}-${pad(d.getDate())} ${pad(d.getHours())}:${pad(d.getMinutes())}`;
}

/** The value a datetime-local input takes for a moment, in the browser's time zone. */
export function localInputValue(ms) {
  const d = new Date(ms);
  return `${d.getFullYear()}-${pad(d.getMonth() + 1)}-${pad(d.getDate())}T${pad(d.getHours())}:${pad(d.getMinutes())}`;
}

/** Builds an element; text goes in as text, never as markup, so names and labels cannot inject. */
export function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [key, value] of Object.entries(attrs)) {
    if (value === null || value === undefined || value === false) continue;
    if (key === 'class') node.className = value;
    else if (key === 'text') node.textContent = value;
    else if (key.startsWith('on') && typeof value === 'function') {
      node.addEventListener(key.slice(2), value);
    } else node.setAttribute(key, value === true ? '' : String(value));
  }
  for (const child of children.flat(Infinity)) {
    if (child === null || child === undefined || child === false) continue;
    node.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return node;
}

export const STATE_SIGN = {
  'data-problem': '⚠',
  'alert-open': '!',
  'credible-shift': '◆',
  gathering: '…',
  watching: '○',
};

export function stateBadge(state, text) {
  return el(
    'span',
    { class: `state state-${state}`, 'data-state': state },
    el('span', { class: 'sign', 'aria-hidden': 'true', text: STATE_SIGN[state] ?? '•' }),
    text,
  );
}
