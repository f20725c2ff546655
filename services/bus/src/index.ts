export * from './bus.ts';
