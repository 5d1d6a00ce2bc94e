//! CIF: the grammar (bytes to document) and the document model (blocks, items, loops).
