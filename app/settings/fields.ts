import { WINDOW_SECONDS_CHOICES } from "~/ingest/window";

/** The tenant settings the Settings page edits, in form order, with the names people read. */
export const SETTING_LABELS = {
  sampleSize: "Sample size k",
  windowSeconds: "Window length",
  weightAttribute: "Weight attribute",
  retentionDays: "Retention",
} as const;
export type SettingField = keyof typeof SETTING_LABELS;

export interface TenantSettings {
  sampleSize: number;
  windowSeconds: number;
  weightAttribute: "bytes" | "packets";
  retentionDays: number;
}

export const WINDOW_CHOICES = WINDOW_SECONDS_CHOICES.map((seconds) => ({ seconds, label: windowLabel(seconds) }));

/** 300 → "5 minutes". */
export function windowLabel(seconds: number): string {
  const minutes = seconds / 60;
  return minutes === 1 ? "1 minute" : Number.isInteger(minutes) ? `${minutes} minutes` : `${seconds} seconds`;
}

/** A setting's value as a person reads it in a confirmation or the ledger. */
export function settingText(field: SettingField, value: number | string): string {
  if (field === "windowSeconds") return windowLabel(Number(value));
  if (field === "retentionDays") return Number(value) === 1 ? "1 day" : `${value} days`;
  return String(value);
}
