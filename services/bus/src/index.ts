export * from './bus.ts';
export * from './memory.ts';
