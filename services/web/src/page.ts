import { escapeHtml } from '@trueshift/report';

/**
 * The one HTML document behind every page address: the overview and each tag's view are drawn by
 * the page's own modules from the address, so a bookmark or a reload lands where it was.
 */
export function pageShell(caution: string): string {
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="color-scheme" content="light">
<title>trueshift</title>
<link rel="stylesheet" href="/assets/vendor/uplot.css">
<link rel="stylesheet" href="/assets/app.css">
<script defer src="/assets/vendor/uplot.js"></script>
<script type="module" src="/assets/app.js"></script>
</head>
<body>
<a class="skip" href="#main">Skip to the content</a>
<header class="bar">
  <a class="brand" href="/" data-nav>trueshift</a>
  <nav aria-label="Where you are" id="crumbs"></nav>
  <span id="live" class="live" role="status" aria-live="polite">Not connected</span>
  <button type="button" id="token-button" class="ghost">Token: none</button>
</header>
<p class="caution" role="note">${escapeHtml(caution)}</p>
<div id="notice" class="notice" role="alert" hidden></div>
<main id="main" tabindex="-1"><p>Loading…</p></main>
<dialog id="token-dialog" aria-labelledby="token-title">
  <form method="dialog" id="token-form">
    <h2 id="token-title">API token</h2>
    <p>Paste a token to read (when the service asks for one) and to mark changes, acknowledge alerts and set risk levels. It is kept in this browser tab only, until the tab closes.</p>
    <label for="token-input">Token</label>
    <input id="token-input" name="token" type="password" autocomplete="off" spellcheck="false" placeholder="ts_…">
    <div class="actions">
      <button type="submit" value="save">Use this token</button>
      <button type="submit" value="forget" class="ghost">Forget the token</button>
      <button type="submit" value="cancel" class="ghost">Cancel</button>
    </div>
  </form>
</dialog>
</body>
</html>
`;
}
