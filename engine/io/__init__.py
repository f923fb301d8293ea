"""In and out: tables for memos and papers, settings records, formulas (checked before
evaluation), fits made in other libraries, and the robustness table."""
