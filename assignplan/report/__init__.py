"""Everything that turns a plan into something to read: tables, exports, charts."""
