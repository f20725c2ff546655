import { startBoard } from './main.js';

window.keelsonBoard = startBoard();
