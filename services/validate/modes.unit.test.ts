import { describe, expect, it } from "vitest";
import { createModeKeeper } from "./modes.js";

const T0 = 1_767_225_600_000;
const approval = (proposalId: string, decision: "approve" | "reject" = "approve") =>
  decision === "approve"
    ? { proposalId, decision, user: "op-7", at: T0 }
    : { proposalId, decision, user: "op-7", at: T0, reason: "not now" };

describe("createModeKeeper", () => {
  it("starts advisory and makes a validated proposal wait for approval until its expiry", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    expect(k.state().mode).toBe("advisory");
    const after = k.afterValidation("p1", "c1", "item", T0);
    expect(after).toEqual({ next: "await-approval", expiresAtMs: T0 + 60_000, superseded: [] });
    const out = k.answer(approval("p1"), T0 + 1000);
    expect(out.kind).toBe("dispatch");
    // answered once: a second approval of the same proposal is ignored
    expect(k.answer(approval("p1"), T0 + 2000).kind).toBe("ignored");
  });

  it("ignores an approval that arrives after the expiry, and expire() hands back unanswered proposals", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    k.afterValidation("p1", "c1", "a", T0);
    const late = k.answer(approval("p1"), T0 + 60_000);
    expect(late).toMatchObject({ kind: "ignored", code: "VALIDATE_APPROVAL_EXPIRED" });
    k.afterValidation("p2", "c2", "b", T0);
    expect(k.expire(T0 + 59_999)).toEqual([]);
    expect(k.expire(T0 + 60_000).map((p) => p.proposalId)).toEqual(["p2"]);
  });

  it("lets only the latest proposal be approved: a newer one supersedes the one waiting", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    k.afterValidation("p1", "c1", "a", T0);
    const second = k.afterValidation("p2", "c2", "b", T0 + 10);
    expect(second.next === "await-approval" && second.superseded.map((p) => p.proposalId)).toEqual(["p1"]);
    expect(k.answer(approval("p1"), T0 + 20)).toMatchObject({
      kind: "ignored",
      code: "VALIDATE_APPROVAL_IGNORED",
    });
  });

  it("turns a rejection into a rejected outcome with the operator's reason", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    k.afterValidation("p1", "c1", "a", T0);
    const out = k.answer(approval("p1", "reject"), T0 + 5);
    expect(out.kind === "rejected" && out.approval.reason).toBe("not now");
  });

  it("dispatches at once in closed loop and observes only when off", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    expect(k.request({ mode: "closed-loop", user: "eng", reason: "trial" }, T0).accepted).toBe(true);
    expect(k.afterValidation("p1", "c1", "a", T0).next).toBe("dispatch");
    k.request({ mode: "off", user: "eng", reason: "maintenance" }, T0);
    expect(k.afterValidation("p2", "c2", "b", T0).next).toBe("observe");
  });

  it("drops proposals waiting for approval when the mode changes", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: true });
    k.afterValidation("p1", "c1", "a", T0);
    const change = k.request({ mode: "off", user: "eng", reason: "stop" }, T0 + 1);
    expect(change.dropped.map((p) => p.proposalId)).toEqual(["p1"]);
    expect(k.pending()).toEqual([]);
  });

  it("refuses closed loop when the site policy requires approval, keeping the mode in force", () => {
    const k = createModeKeeper<string>({ approvalTimeoutS: 60, allowClosedLoop: false });
    const change = k.request({ mode: "closed-loop", user: "eng", reason: "go" }, T0);
    expect(change.accepted).toBe(false);
    expect(change.state.mode).toBe("advisory");
    expect(change.reason).toMatch(/requires approval/);
  });
});
