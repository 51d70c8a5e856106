"""Storage: SQLModel tables, the repository, the engine and the migrations. Nothing outside this
package speaks SQL."""
