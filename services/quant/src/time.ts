// ACT/365 fixed, as the contract defines the year fraction, on millisecond instants.
export const MS_PER_YEAR = 365 * 86_400_000;

/** (toMs - fromMs) / (365 x 86 400 000): negative when `toMs` is before `fromMs`. */
export function yearFraction(fromMs: number, toMs: number): number {
  return (toMs - fromMs) / MS_PER_YEAR;
}
