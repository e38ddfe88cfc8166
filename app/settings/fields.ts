import { WINDOW_SECONDS_CHOICES } from "~/ingest/window";

/** The tenant settings the Settings page edits, in form order, with the names people read. */
export const SETTING_LABELS = {
  sampleSize: "Sample size k",
  windowSeconds: "Window length",
  weightAttribute: "Weight attribute",
  retentionDays: "Fine windows kept (days)",
  hourlyRetentionDays: "Hourly windows kept until (days old)",
  hourlySampleSize: "Hourly sample size",
  coordinated: "Coordinated priorities",
} as const;
export type SettingField = keyof typeof SETTING_LABELS;

export interface TenantSettings {
  sampleSize: number;
  windowSeconds: number;
  weightAttribute: "bytes" | "packets";
  /** N: fine windows (shorter than an hour) are rolled up into hourly ones after this many days. */
  retentionDays: number;
  /** M ≥ N: every window is deleted once this many days old. */
  hourlyRetentionDays: number;
  /** K of the hourly windows the roll-up writes; null: the tenant's k. At most k · 3600 / window seconds. */
  hourlySampleSize: number | null;
  coordinated: boolean;
}

export const WINDOW_CHOICES = WINDOW_SECONDS_CHOICES.map((seconds) => ({ seconds, label: windowLabel(seconds) }));

/** 300 → "5 minutes". */
export function windowLabel(seconds: number): string {
  const minutes = seconds / 60;
  return minutes === 1 ? "1 minute" : Number.isInteger(minutes) ? `${minutes} minutes` : `${seconds} seconds`;
}

/** A setting's value as a person reads it in a confirmation or the ledger. */
export function settingText(field: SettingField, value: number | string | boolean | null): string {
  if (field === "hourlySampleSize" && value === null) return "the sample size k";
  if (field === "windowSeconds") return windowLabel(Number(value));
  if (field === "retentionDays" || field === "hourlyRetentionDays") return Number(value) === 1 ? "1 day" : `${value} days`;
  if (field === "coordinated") return value ? "on" : "off";
  return String(value);
}
