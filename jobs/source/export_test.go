package source

// CachedBlocks reports how many blocks the rows keep in memory (-1 with no
// cache), for the tests.
func (r *Rows) CachedBlocks() int {
	if r.cache == nil {
		return -1
	}
	return len(r.cache)
}
