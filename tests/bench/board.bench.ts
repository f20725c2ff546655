// The desk view's frame times in headless chromium with 5 000 nodes changing ten times a second.
import { printFrameBench } from '../../services/board/bench/frames.ts';

await printFrameBench();
