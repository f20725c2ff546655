export {};
export * from './sse.ts';
