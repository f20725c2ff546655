/* global document -- browser globals: this file runs in the page */
// The node grid: an ARIA treegrid that draws only the rows in view (a pool of row elements rebound
// as the user scrolls), and on each animation frame touches only the cells whose text changed.
import { compact, precise, NONE } from './format.js';
import { METRIC_COLUMNS } from './model.js';

export const ROW_HEIGHT = 28; // px; must match --row-h in board.css
const OVERSCAN = 6;
const FLASH_MS = 900;
const DIM_TAG = { desk: 'desk', book: 'book', underlying: 'und', tenor: 'tenor' };

export const COLUMNS = [
  { id: 'node', title: 'Node' },
  { id: 'pv', title: 'PV', unit: 'present value, reporting currency' },
  { id: 'pnl', title: 'P&L', unit: 'pv minus traded premium, reporting currency' },
  { id: 'delta', title: 'Delta', unit: 'units of the underlying; only where the node fixes one underlying' },
  { id: 'cashDelta', title: 'Cash delta', unit: 'delta times spot, reporting currency' },
  { id: 'gamma', title: 'Gamma', unit: 'units per unit of spot; only where the node fixes one underlying' },
  { id: 'cashGamma', title: 'Cash gamma', unit: 'cash delta change for a 1% spot move' },
  { id: 'vega', title: 'Vega', unit: 'per vol point' },
  { id: 'theta', title: 'Theta', unit: 'per calendar day' },
  { id: 'rho', title: 'Rho', unit: 'per 1% parallel rate shift' },
  { id: 'positions', title: 'Pos.', unit: 'live trades in the node' },
  { id: 'status', title: 'Status', unit: 'stale prices and unpriced positions' },
];

function el(tag, cls, attrs) {
  const e = document.createElement(tag);
  if (cls) e.className = cls;
  if (attrs) for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, v);
  return e;
}

export class TreeView {
  /**
   * @param {HTMLElement} host  empty container
   * @param {import('./model.js').NodeTree} tree
   * @param {{ onActivate?: (entry) => void }} hooks
   */
  constructor(host, tree, hooks = {}) {
    this.tree = tree;
    this.hooks = hooks;
    this.dirty = new Set();
    this.slots = [];
    this.shapeSeen = -1;
    this.activeKey = 'firm';
    this.forceBind = true;

    this.grid = el('div', 'grid', {
      role: 'treegrid',
      'aria-label': 'Exposures by node',
      tabindex: '0',
      'aria-colcount': String(COLUMNS.length),
      'aria-multiselectable': 'false',
    });
    const head = el('div', 'grid-head', { role: 'rowgroup' });
    const headRow = el('div', 'row head', { role: 'row', 'aria-rowindex': '1' });
    for (const c of COLUMNS) {
      const h = el('div', `cell c-${c.id}`, { role: 'columnheader' });
      h.textContent = c.title;
      if (c.unit) h.title = c.unit;
      headRow.append(h);
    }
    head.append(headRow);
    this.body = el('div', 'grid-body', { role: 'rowgroup' });
    this.spacer = el('div', 'grid-spacer', { 'aria-hidden': 'true' });
    this.body.append(this.spacer);
    this.grid.append(head, this.body);
    host.append(this.grid);

    this.body.addEventListener(
      'scroll',
      () => {
        this.scrolled = true;
      },
      { passive: true },
    );
    this.body.addEventListener('click', (ev) => this.#onClick(ev));
    this.grid.addEventListener('keydown', (ev) => this.#onKey(ev));
  }

  /** Marks a node changed; the next frame redraws its row if it is in view. */
  touch(key) {
    this.dirty.add(key);
  }

  invalidate() {
    this.forceBind = true;
  }

  #slot() {
    const row = el('div', 'row', { role: 'row', id: `grid-row-${this.slots.length}` });
    const cells = COLUMNS.map((c, i) => {
      const cell = el('div', `cell c-${c.id}`, { role: 'gridcell', 'aria-colindex': String(i + 1) });
      cell.lastText = '';
      // Figures change by rewriting one text node's data: no nodes created or dropped per update.
      if (i > 0) cell.append((cell.text = document.createTextNode('')));
      cell.moveAt = 0;
      cell.flashUntil = 0;
      row.append(cell);
      return cell;
    });
    const first = cells[0];
    const tog = el('span', 'tog', { 'aria-hidden': 'true' });
    const tag = el('span', 'tag');
    const label = el('span', 'label');
    first.append(tog, tag, label);
    const slot = { row, cells, tog, tag, label, entry: null, flashing: 0 };
    this.body.append(row);
    this.slots.push(slot);
    return slot;
  }

  /** Draws one frame: call from requestAnimationFrame. `now` is the frame's performance.now(). */
  render(now) {
    const rows = this.tree.rows();
    if (this.shapeSeen !== this.tree.shape) {
      this.shapeSeen = this.tree.shape;
      this.spacer.style.height = `${rows.length * ROW_HEIGHT}px`;
      this.grid.setAttribute('aria-rowcount', String(rows.length + 1));
      this.forceBind = true;
      if (!this.tree.byKey.has(this.activeKey)) this.activeKey = 'firm';
    }
    const viewH = this.body.clientHeight || 600;
    const need = Math.ceil(viewH / ROW_HEIGHT) + OVERSCAN * 2;
    while (this.slots.length < need) this.#slot();
    const top = Math.floor(this.body.scrollTop / ROW_HEIGHT);
    const first = Math.max(0, top - OVERSCAN);
    const lastVisible = top + Math.ceil(viewH / ROW_HEIGHT);
    const rebind = this.forceBind || this.scrolled;
    // Every changed row in view is redrawn in the first frame after its batch arrives, and the
    // frames between batches touch nothing. Spreading a batch over several frames (a third of the
    // rows each) was tried: the browser's fixed cost per changed frame (layerize, pre-paint,
    // commit) then came every frame, and measured at 5 000 nodes and 10 Hz it cost the main thread
    // about a fifth more than one frame with all the rows. Overscan rows (out of view) wait until
    // they come into view.
    const deferred = [];
    const n = this.slots.length;
    for (let i = 0; i < n; i++) {
      const slot = this.slots[i];
      const index = first + i;
      const entry = rows[index];
      if (!entry) {
        if (slot.entry) {
          slot.row.hidden = true;
          slot.entry = null;
        }
        continue;
      }
      if (rebind || slot.entry !== entry) {
        // A fold changes the row's own aria-expanded and toggle even when it stays in place.
        if (this.forceBind || slot.entry !== entry || slot.index !== index) this.#place(slot, entry, index);
        this.#values(slot, entry, now);
      } else if (this.dirty.has(entry.key)) {
        if (index >= top && index <= lastVisible) this.#values(slot, entry, now);
        else deferred.push(entry.key);
      }
      if (slot.flashing > 0) this.#unflash(slot, now);
    }
    this.dirty.clear();
    for (const key of deferred) this.dirty.add(key);
    this.forceBind = false;
    this.scrolled = false;
    this.#markActive(rows);
  }

  #place(slot, entry, index) {
    const { row } = slot;
    slot.entry = entry;
    slot.index = index;
    row.hidden = false;
    row.style.transform = `translateY(${index * ROW_HEIGHT}px)`;
    row.setAttribute('aria-rowindex', String(index + 2));
    row.setAttribute('aria-level', String(entry.depth + 1));
    row.setAttribute('aria-posinset', String(entry.pos));
    row.setAttribute('aria-setsize', String(entry.setSize));
    const parentish = entry.children.length > 0;
    if (parentish) row.setAttribute('aria-expanded', String(entry.expanded));
    else row.removeAttribute('aria-expanded');
    row.dataset.kind = entry.kind;
    row.dataset.key = entry.key;
    row.style.setProperty('--depth', String(entry.depth));
    slot.tog.textContent = parentish ? (entry.expanded ? '\u25be' : '\u25b8') : '';
    slot.tag.textContent = entry.kind === 'group' ? '' : entry.depth === 0 ? '' : (DIM_TAG[entry.dim] ?? '');
    slot.label.textContent =
      entry.kind === 'group' ? `${entry.label} (${entry.children.length})` : entry.label;
    slot.cells[0].title = entry.kind === 'group' ? `${entry.parent.key}: nodes ${entry.label}` : entry.key;
    for (const c of slot.cells) {
      c.moveAt = 0;
      c.flashUntil = 0;
      c.classList.remove('up', 'dn');
    }
    slot.flashing = 0;
  }

  #values(slot, entry, now) {
    const msg = entry.msg;
    const cells = slot.cells;
    for (let m = 0; m < METRIC_COLUMNS.length; m++) {
      const metric = METRIC_COLUMNS[m];
      const cell = cells[m + 1];
      const text = msg ? compact(msg[metric]) : '';
      if (text !== cell.lastText) {
        cell.text.data = text;
        cell.lastText = text;
      }
      const at = entry.moveAt[m];
      if (at !== 0 && at !== cell.moveAt) {
        cell.moveAt = at;
        if (now - at < FLASH_MS) {
          const dir = entry.moveDir[m];
          cell.classList.toggle('up', dir > 0);
          cell.classList.toggle('dn', dir < 0);
          if (cell.flashUntil === 0) slot.flashing++;
          cell.flashUntil = at + FLASH_MS;
        }
      }
    }
    const pos = cells[10];
    const posText = msg ? String(msg.positions) : '';
    if (pos.lastText !== posText) {
      pos.text.data = posText;
      pos.lastText = posText;
    }
    const status = cells[11];
    let statusText = '';
    let statusTitle = '';
    if (msg) {
      const parts = [];
      const titles = [];
      if (msg.stale) {
        parts.push('\u25d4 stale');
        titles.push('a spot in this node is older than the staleness threshold');
      }
      let unpriced = 0;
      for (const [reason, n] of Object.entries(msg.unpriced ?? {})) {
        unpriced += n;
        titles.push(`${n} unpriced: ${reason}`);
      }
      if (unpriced > 0) parts.push(`\u2205 ${unpriced}`);
      if (msg.positions === 0) parts.push('empty');
      statusText = parts.join(' ');
      statusTitle = titles.join('; ');
    }
    if (status.lastText !== statusText) {
      status.text.data = statusText;
      status.lastText = statusText;
      status.title = statusTitle;
      slot.row.classList.toggle('is-stale', Boolean(msg?.stale));
      slot.row.classList.toggle('is-unpriced', statusText.includes('\u2205'));
    }
  }

  #unflash(slot, now) {
    for (const cell of slot.cells) {
      if (cell.flashUntil !== 0 && cell.flashUntil <= now) {
        cell.flashUntil = 0;
        cell.classList.remove('up', 'dn');
        slot.flashing--;
      }
    }
  }

  #markActive(rows) {
    let activeId = '';
    for (const slot of this.slots) {
      const on = slot.entry !== null && slot.entry.key === this.activeKey;
      if (on) activeId = slot.row.id;
      if (slot.row.classList.contains('active') !== on) {
        slot.row.classList.toggle('active', on);
        slot.row.setAttribute('aria-selected', String(on));
      }
    }
    // Only on change: rewriting the attribute every frame costs style and accessibility work.
    if (activeId !== this.activeId) {
      this.activeId = activeId;
      if (activeId) this.grid.setAttribute('aria-activedescendant', activeId);
      else this.grid.removeAttribute('aria-activedescendant');
    }
    this.activeRows = rows;
  }

  activeIndex() {
    const rows = this.tree.rows();
    const i = rows.findIndex((r) => r.key === this.activeKey);
    return i < 0 ? 0 : i;
  }

  setActive(index) {
    const rows = this.tree.rows();
    const i = Math.max(0, Math.min(rows.length - 1, index));
    const entry = rows[i];
    if (!entry) return;
    this.activeKey = entry.key;
    // Keep the active row in view: the pool only holds rows near the viewport.
    const top = i * ROW_HEIGHT;
    const viewH = this.body.clientHeight;
    if (top < this.body.scrollTop) this.body.scrollTop = top;
    else if (top + ROW_HEIGHT > this.body.scrollTop + viewH) this.body.scrollTop = top + ROW_HEIGHT - viewH;
    this.forceBind = true;
    this.hooks.onActivate?.(entry);
  }

  #toggle(entry, open) {
    if (this.tree.toggle(entry, open)) this.forceBind = true;
  }

  #onClick(ev) {
    const rowEl = ev.target.closest('.row');
    const slot = this.slots.find((s) => s.row === rowEl);
    if (!slot?.entry) return;
    if (ev.target.closest('.tog') || slot.entry.kind === 'group') this.#toggle(slot.entry);
    this.setActive(slot.index);
    this.grid.focus({ preventScroll: true });
  }

  #onKey(ev) {
    const rows = this.tree.rows();
    const i = this.activeIndex();
    const entry = rows[i];
    if (!entry) return;
    const page = Math.max(1, Math.floor(this.body.clientHeight / ROW_HEIGHT) - 1);
    switch (ev.key) {
      case 'ArrowDown':
        this.setActive(i + 1);
        break;
      case 'ArrowUp':
        this.setActive(i - 1);
        break;
      case 'PageDown':
        this.setActive(i + page);
        break;
      case 'PageUp':
        this.setActive(i - page);
        break;
      case 'Home':
        this.setActive(0);
        break;
      case 'End':
        this.setActive(rows.length - 1);
        break;
      case 'ArrowRight':
        if (entry.children.length && !entry.expanded) this.#toggle(entry, true);
        else if (entry.children.length) this.setActive(i + 1);
        break;
      case 'ArrowLeft':
        if (entry.children.length && entry.expanded) this.#toggle(entry, false);
        else if (entry.parent) this.setActive(this.tree.rows().indexOf(entry.parent));
        break;
      case 'Enter':
      case ' ':
        this.#toggle(entry);
        break;
      default:
        return;
    }
    ev.preventDefault();
  }
}

export { precise, NONE };
