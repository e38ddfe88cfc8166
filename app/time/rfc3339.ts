/**
 * The one reader of date-time text in Weir: RFC 3339 §5.6 ("Date and Time on the Internet:
 * Timestamps"), used for flow-record times (app/flow/record.ts) and for the time ranges of
 * estimate, merge and sample requests (app/query/request.ts).
 *
 * Accepted (RFC 3339 §5.6 ABNF):
 *
 *     date-time = full-date "T" full-time                ; e.g. 2024-05-01T02:00:00Z
 *     full-date = 4DIGIT "-" 2DIGIT "-" 2DIGIT            ; year-month-day, a real calendar day
 *     full-time = 2DIGIT ":" 2DIGIT ":" 2DIGIT ["." 1*DIGIT] time-offset
 *     time-offset = "Z" / ("+" / "-") 2DIGIT ":" 2DIGIT   ; hours 00–23, minutes 00–59
 *
 * - `t`, `z` in lower case and a space instead of `T` (the NOTE of §5.6).
 * - `-00:00` (§4.3, "unknown local offset") is the same instant as `Z`.
 * - Fractions of any length; Weir keeps milliseconds and truncates the rest (toward the past).
 * - A leap second (`:60`, §5.7) only where §5.7 allows one: in the last minute of a month's
 *   last day in UTC (after the offset is applied; which months had one is not checked).
 *   Weir's times are POSIX milliseconds, which have no 61st second, so a leap second maps to
 *   the last millisecond of its UTC day (23:59:59.999Z): the record stays in the day and the
 *   window it happened in, and times keep their order (never earlier than 23:59:59).
 * - A bare full-date (`2024-05-01`, UTC midnight) only with `{ date: true }`: the estimate
 *   API's ranges take one, flow records do not (a flow time at midnight is a mistake more
 *   often than a time).
 *
 * Refused, with a reason: omitted seconds (`02:00Z`; partial-time requires them), a comma
 * before the fraction (ISO 8601 allows it, RFC 3339 does not), no offset (§4.4: local time
 * without an offset is not an instant), week or ordinal dates, days that do not exist.
 *
 * Pure module: no I/O, no Date (so years 0000–0099 are read as written, not as 1900–1999).
 */

/** The forms, for messages. */
export const RFC3339_FORM = "RFC 3339 text such as 2024-05-01T02:00:00Z or 2024-05-01T04:00:00.250+02:00";

export interface Rfc3339Options {
  /** Also take a bare full-date (e.g. 2024-05-01) as UTC midnight. */
  date?: boolean;
}

const MINUTE_MS = 60_000;
const DAY_MS = 86_400_000;

/** Epoch days of a proleptic Gregorian date (days from civil, after H. Hinnant's public-domain algorithm). */
function epochDays(year: number, month: number, day: number): number {
  const y = month <= 2 ? year - 1 : year;
  const era = Math.floor(y / 400);
  const yoe = y - era * 400;
  const doy = Math.floor((153 * (month + (month > 2 ? -3 : 9)) + 2) / 5) + day - 1;
  const doe = yoe * 365 + Math.floor(yoe / 4) - Math.floor(yoe / 100) + doy;
  return era * 146_097 + doe - 719_468;
}

function isLeapYear(year: number): boolean {
  return (year % 4 === 0 && year % 100 !== 0) || year % 400 === 0;
}

/** RFC 3339 §5.7: 28, 29, 30 or 31 by month and year. */
function daysInMonth(year: number, month: number): number {
  if (month === 2) return isLeapYear(year) ? 29 : 28;
  return month === 4 || month === 6 || month === 9 || month === 11 ? 30 : 31;
}

function digits(text: string, at: number, count: number): number {
  if (at + count > text.length) return -1;
  let value = 0;
  for (let i = at; i < at + count; i++) {
    const c = text.charCodeAt(i);
    if (c < 48 || c > 57) return -1;
    value = value * 10 + (c - 48);
  }
  return value;
}

/**
 * Epoch milliseconds of RFC 3339 date-time text, or a reason string when it is not one
 * (the reason completes "… must be …" style messages: it starts with a verb).
 * Times before 1970 come out negative; callers apply their own range.
 *
 * @example parseRfc3339("1985-04-12T23:20:50.52Z") // 482196050520 (RFC 3339 §5.8)
 * @example parseRfc3339("1996-12-19T16:39:57-08:00") // 851042397000 (RFC 3339 §5.8)
 * @example parseRfc3339("1990-12-31T23:59:60Z") // 662687999999 (a leap second, §5.7: 23:59:59.999Z)
 * @example parseRfc3339("2024-05-01", { date: true }) // 1714521600000
 * @example parseRfc3339("2024-05-01T02:00Z") // "needs seconds (RFC 3339 §5.6 partial-time): …"
 */
export function parseRfc3339(text: string, options: Rfc3339Options = {}): number | string {
  const bad = `must be ${RFC3339_FORM}${options.date ? " (or a date such as 2024-05-01, read as UTC midnight)" : ""}`;
  const year = digits(text, 0, 4);
  const month = digits(text, 5, 2);
  const day = digits(text, 8, 2);
  if (year < 0 || month < 0 || day < 0 || text[4] !== "-" || text[7] !== "-") return bad;
  const realDay = month >= 1 && month <= 12 && day >= 1 && day <= daysInMonth(year, month);
  if (text.length === 10) {
    if (!options.date) return `needs a time and an offset (RFC 3339 §5.6 date-time), e.g. ${text}T00:00:00Z`;
    return realDay ? epochDays(year, month, day) * DAY_MS : `is not a real date: ${bad}`;
  }
  const separator = text[10];
  if (separator !== "T" && separator !== "t" && separator !== " ") return bad;
  const hour = digits(text, 11, 2);
  const minute = digits(text, 14, 2);
  if (hour < 0 || minute < 0 || text[13] !== ":") return bad;
  if (text[16] !== ":") {
    if (text.length === 16) return `needs seconds and an offset (RFC 3339 §5.6 date-time), e.g. ${text}:00Z`;
    return /^(?:[Zz]|[+-]\d\d:\d\d)$/.test(text.slice(16)) ? `needs seconds (RFC 3339 §5.6 partial-time): ${text.slice(0, 16)}:00${text.slice(16)}` : bad;
  }
  const second = digits(text, 17, 2);
  if (second < 0) return bad;
  let i = 19;
  let fractionMs = 0;
  if (text[i] === ".") {
    i++;
    const first = i;
    let scale = 100;
    while (i < text.length) {
      const c = text.charCodeAt(i);
      if (c < 48 || c > 57) break;
      if (scale >= 1) fractionMs += (c - 48) * scale; // digits past the millisecond are truncated
      scale /= 10;
      i++;
    }
    if (i === first) return bad;
  } else if (text[i] === ",") {
    return `must write the fraction of a second after "." (RFC 3339 §5.6 time-secfrac), not ","`;
  }
  let offsetMinutes = 0;
  const zone = text[i];
  if (zone === "Z" || zone === "z") {
    i++;
  } else if (zone === "+" || zone === "-") {
    const offsetHour = digits(text, i + 1, 2);
    const offsetMinute = digits(text, i + 4, 2);
    if (offsetHour < 0 || offsetMinute < 0 || text[i + 3] !== ":") return bad;
    if (offsetHour > 23 || offsetMinute > 59) return `has an impossible offset (hours 00–23, minutes 00–59): ${bad}`;
    offsetMinutes = (zone === "+" ? 1 : -1) * (offsetHour * 60 + offsetMinute);
    i += 6;
  } else if (i === text.length) {
    return `needs an offset, Z or ±hh:mm (RFC 3339 §4.4: a local time without one is no instant): ${bad}`;
  } else {
    return bad;
  }
  if (i !== text.length) return bad;
  if (!realDay || hour > 23 || minute > 59 || second > 60) return `is not a real date and time: ${bad}`;
  const local = epochDays(year, month, day) * DAY_MS + (hour * 60 + minute) * MINUTE_MS;
  const utcMinute = local - offsetMinutes * MINUTE_MS;
  if (second === 60) {
    // §5.7: a leap second ends a month, at 23:59:60 UTC (shifted by the offset in other zones).
    const dayStart = Math.floor(utcMinute / DAY_MS) * DAY_MS;
    const lastMinuteOfDay = utcMinute - dayStart === DAY_MS - MINUTE_MS;
    const nextDay = civilDay(dayStart / DAY_MS + 1);
    if (!lastMinuteOfDay || nextDay !== 1) {
      return "has a leap second (:60) where none can be: RFC 3339 §5.7 allows one only at 23:59:60 UTC on a month's last day";
    }
    return utcMinute + 59_999;
  }
  return utcMinute + second * 1000 + fractionMs;
}

/** Day of the month of an epoch day (civil from days, H. Hinnant). */
function civilDay(days: number): number {
  const z = days + 719_468;
  const era = Math.floor(z / 146_097);
  const doe = z - era * 146_097;
  const yoe = Math.floor((doe - Math.floor(doe / 1460) + Math.floor(doe / 36_524) - Math.floor(doe / 146_096)) / 365);
  const doy = doe - (365 * yoe + Math.floor(yoe / 4) - Math.floor(yoe / 100));
  const mp = Math.floor((5 * doy + 2) / 153);
  return doy - Math.floor((153 * mp + 2) / 5) + 1;
}
