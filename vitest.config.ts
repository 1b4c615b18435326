import { defineConfig } from "vitest/config";

// Test tiers by file suffix: unit (pure, milliseconds), int (a real broker), e2e (the closed loop).
export default defineConfig({
  test: {
    projects: [
      {
        test: {
          name: "unit",
          include: [
            "services/**/*.unit.test.ts",
            "cli/**/*.unit.test.ts",
            "test/**/*.unit.test.ts",
            "scripts/**/*.unit.test.ts",
          ],
          testTimeout: 30_000,
        },
      },
      {
        test: {
          name: "int",
          include: ["services/**/*.int.test.ts", "cli/**/*.int.test.ts", "test/**/*.int.test.ts"],
          testTimeout: 60_000,
          hookTimeout: 60_000,
          // Integration tests share two cores and real brokers; one file at a time keeps timing honest.
          fileParallelism: false,
        },
      },
      {
        test: {
          name: "e2e",
          include: ["services/**/*.e2e.test.ts", "test/**/*.e2e.test.ts"],
          exclude: ["test/closed-loop.e2e.test.ts"],
          testTimeout: 600_000,
          hookTimeout: 120_000,
          fileParallelism: false,
        },
      },
      {
        // The closed-loop comparison of modifier adaptation with two-step RTO: about 7 minutes of
        // wall time, and its margin (0.35–0.41 % against the 0.5 % it asserts) is too thin for a CI
        // machine under load; run it with `npm run test:loop`.
        test: {
          name: "loop",
          include: ["test/closed-loop.e2e.test.ts"],
          testTimeout: 900_000,
          hookTimeout: 120_000,
          fileParallelism: false,
        },
      },
    ],
  },
});
