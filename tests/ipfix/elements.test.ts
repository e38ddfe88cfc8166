// The information-element table (app/ipfix/elements.ts), generated from Debian's python3-ipfix
// copy of the IANA registry. Expected ids and types: RFC 7012 §5 / RFC 5102 §5 and the IANA
// "IPFIX Information Elements" registry (values recalled from memory); reverse elements:
// RFC 5103 §6.1.
import { execFileSync } from "node:child_process";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { elementById, elementByName, REVERSE_PEN } from "~/ipfix/elements";
import { pythonIpfixDir } from "./debian";

describe("IPFIX information elements", () => {
  test.each([
    [1, "octetDeltaCount", "unsigned64"],
    [2, "packetDeltaCount", "unsigned64"],
    [4, "protocolIdentifier", "unsigned8"],
    [7, "sourceTransportPort", "unsigned16"],
    [8, "sourceIPv4Address", "ipv4Address"],
    [21, "flowEndSysUpTime", "unsigned32"],
    [22, "flowStartSysUpTime", "unsigned32"],
    [27, "sourceIPv6Address", "ipv6Address"],
    [34, "samplingInterval", "unsigned32"],
    [85, "octetTotalCount", "unsigned64"],
    [150, "flowStartSeconds", "dateTimeSeconds"],
    [152, "flowStartMilliseconds", "dateTimeMilliseconds"],
    [154, "flowStartMicroseconds", "dateTimeMicroseconds"],
    [156, "flowStartNanoseconds", "dateTimeNanoseconds"],
    [158, "flowStartDeltaMicroseconds", "unsigned32"],
    [160, "systemInitTimeMilliseconds", "dateTimeMilliseconds"],
    [305, "samplingPacketInterval", "unsigned32"], // RFC 5477
    [310, "samplingPopulation", "unsigned32"], // RFC 5477
  ])("element %i is %s (%s)", (id, name, type) => {
    expect(elementById(id)).toEqual({ enterprise: 0, id, name, type });
    expect(elementByName(name)).toEqual({ enterprise: 0, id, name, type });
  });

  test("RFC 5103 §6.1: reverse elements are PEN 29305, same id, 'reverse' + the name capitalised", () => {
    expect(REVERSE_PEN).toBe(29305);
    expect(elementById(1, 29305)).toEqual({ enterprise: 29305, id: 1, name: "reverseOctetDeltaCount", type: "unsigned64" });
    expect(elementByName("reversePacketDeltaCount")).toEqual({ enterprise: 29305, id: 2, name: "reversePacketDeltaCount", type: "unsigned64" });
    expect(elementById(152, 29305)?.name).toBe("reverseFlowStartMilliseconds");
  });

  test("unknown ids, other enterprises and names in the wrong case are not found", () => {
    expect(elementById(65000)).toBeUndefined();
    expect(elementById(1, 9)).toBeUndefined(); // RFC 7011 §3.2: an id means nothing without its enterprise
    // Element names are lowerCamelCase (RFC 7012 §2.3, recalled from memory): this is no element.
    expect(elementByName("OctetDeltaCount")).toBeUndefined();
  });

  test("the committed module is exactly what the generator makes from Debian's python3-ipfix", () => {
    const dir = pythonIpfixDir();
    const work = mkdtempSync(join(tmpdir(), "weir-elements-"));
    try {
      const out = join(work, "elements.ts");
      execFileSync(process.execPath, ["--import", "tsx", "scripts/gen-ipfix-elements.ts", join(dir, "iana.iespec"), join(dir, "rfc5103.iespec"), out]);
      expect(readFileSync(out, "utf8")).toBe(readFileSync("app/ipfix/elements.ts", "utf8"));
    } finally {
      rmSync(work, { recursive: true, force: true });
    }
  });
});
