// vitest settings for the front end's unit tests (Node 20; no DOM needed for the pure modules).
import { defineConfig } from "vitest/config";

export default defineConfig({
  test: {
    include: ["js/**/*.test.ts"],
    environment: "node",
  },
});
