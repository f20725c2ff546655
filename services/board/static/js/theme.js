/* global document, localStorage -- browser globals: this file runs in the page */
// Light, dark, or whatever the system prefers; the choice is remembered in this browser.
const KEY = 'keelson.board.theme';
const ORDER = ['auto', 'light', 'dark'];

export function initTheme(button) {
  let mode = 'auto';
  try {
    mode = localStorage.getItem(KEY) ?? 'auto';
  } catch {
    // storage may be disabled; the system preference still applies
  }
  const apply = () => {
    if (mode === 'auto') delete document.documentElement.dataset.theme;
    else document.documentElement.dataset.theme = mode;
    button.textContent = `Theme: ${mode}`;
    button.setAttribute('aria-label', `Colour theme: ${mode}. Activate to change.`);
  };
  button.addEventListener('click', () => {
    mode = ORDER[(ORDER.indexOf(mode) + 1) % ORDER.length];
    try {
      localStorage.setItem(KEY, mode);
    } catch {
      // not remembered, still applied
    }
    apply();
  });
  apply();
}
