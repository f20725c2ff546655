import { describe, expect, it } from 'vitest';
import { run } from './sim.ts';

const io = () => {
  let out = '';
  let err = '';
  return {
    io: {
      stdin: process.stdin,
      stdout: { write: (s: string) => ((out += s), true) } as unknown as NodeJS.WritableStream,
      stderr: { write: (s: string) => ((err += s), true) } as unknown as NodeJS.WritableStream,
    },
    out: () => out,
    err: () => err,
  };
};

describe('keelson sim arguments', () => {
  it.each([
    ['--seed', '1.5', "--seed must be an integer >= 0, got '1.5'"],
    ['--underlyings', '0', "--underlyings must be an integer >= 1, got '0'"],
    ['--trades', '10.2', "--trades must be an integer >= 0, got '10.2'"],
    ['--port', '80.5', "--port must be an integer >= 0, got '80.5'"],
    ['--port', '70000', "--port must be an integer in 0..65535, got '70000'"],
    ['--speed', '-1', "--speed must be a number >= 0, got '-1'"],
  ])('refuses %s %s before connecting to anything', async (name, value, message) => {
    const a = io();
    expect(await run(['--brokers', '127.0.0.1:1', `${name}=${value}`], a.io)).toBe(1);
    expect(a.err()).toContain(message);
  });
});
