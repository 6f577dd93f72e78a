// The page's entry: the token, the live event stream, and which view the address asks for.

import { ApiError, followEvents, getToken, setToken } from './api.js';
import { el } from './format.js';
import { renderOverview } from './overview.js';
import { renderTag } from './tag-view.js';

const main = document.getElementById('main');
const notice = document.getElementById('notice');
const crumbs = document.getElementById('crumbs');
const live = document.getElementById('live');
const tokenButton = document.getElementById('token-button');
const tokenDialog = document.getElementById('token-dialog');
const tokenInput = document.getElementById('token-input');

const LIVE_TEXT = {
  live: 'Live',
  reconnecting: 'Reconnecting…',
  down: 'Live updates unavailable',
  'needs-token': 'Live updates need a token',
};

let view = null;
let events = null;

function showNotice(message, kind = 'error') {
  notice.textContent = message;
  notice.dataset.kind = kind;
  notice.hidden = false;
}

function clearNotice() {
  notice.hidden = true;
  notice.textContent = '';
}

function askForToken() {
  tokenInput.value = '';
  if (!tokenDialog.open) tokenDialog.showModal();
  tokenInput.focus();
}

function failed(error) {
  if (error instanceof ApiError && (error.status === 401 || error.status === 403)) {
    showNotice(
      error.status === 401
        ? `A token is needed: ${error.message}`
        : `This token may not do that: ${error.message}`,
    );
    askForToken();
    return;
  }
  showNotice(error instanceof Error ? error.message : String(error));
}

/** Runs a write; on failure says why (and asks for a token when that is the reason). */
async function write(action) {
  try {
    return await action();
  } catch (error) {
    failed(error);
    return undefined;
  }
}

function setCrumbs(parts) {
  crumbs.replaceChildren(
    ...(parts.length === 0
      ? [el('span', { text: 'All tags' })]
      : [
          el('a', { href: '/', 'data-nav': true, text: 'All tags' }),
          ...parts.flatMap((p) => [' › ', el('span', { 'aria-current': 'page', text: p.text })]),
        ]),
  );
}

const ctx = { main, notice: showNotice, clearNotice, failed, write, setCrumbs };

function route() {
  view?.destroy();
  clearNotice();
  const path = location.pathname;
  if (path.startsWith('/tags/') && path.length > '/tags/'.length) {
    const name = decodeURIComponent(path.slice('/tags/'.length));
    document.title = `${name} · trueshift`;
    view = renderTag(ctx, name);
  } else {
    document.title = 'All tags · trueshift';
    view = renderOverview(ctx);
  }
  main.focus({ preventScroll: true });
}

function showToken() {
  tokenButton.textContent = getToken() === null ? 'Token: none' : 'Token: set';
}

document.addEventListener('click', (event) => {
  const link = event.target instanceof Element ? event.target.closest('a[data-nav]') : null;
  if (link === null || event.ctrlKey || event.metaKey || event.shiftKey || event.button !== 0)
    return;
  const url = new URL(link.href);
  if (url.origin !== location.origin) return;
  event.preventDefault();
  history.pushState(null, '', url.pathname + url.search);
  route();
});
window.addEventListener('popstate', route);

tokenButton.addEventListener('click', askForToken);
// The form has method="dialog": a button closes the dialog and leaves its value as returnValue.
tokenDialog.addEventListener('close', () => {
  const choice = tokenDialog.returnValue;
  if (choice === 'save' && tokenInput.value.trim() !== '') setToken(tokenInput.value.trim());
  else if (choice === 'forget') setToken(null);
  else return;
  tokenInput.value = '';
  showToken();
  events?.restart();
  view?.reload();
});

showToken();
events = followEvents({
  onEvent: (event) => view?.onEvent(event),
  onState: (state) => {
    live.dataset.state = state;
    live.textContent = LIVE_TEXT[state] ?? state;
  },
});
route();
