/* global window -- browser globals: this file runs in the page */
import { startBoard } from './main.js';

window.keelsonBoard = startBoard();
