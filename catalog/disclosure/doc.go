// Package disclosure measures how well the quasi-identifiers of a
// version's cases hide each case among others: k-anonymity and its
// equivalence classes (Sweeney, "k-anonymity: a model for protecting
// privacy", 2002), distinct l-diversity of sensitive attributes
// (Machanavajjhala et al., "l-diversity: privacy beyond k-anonymity",
// 2007; for an event-level attribute, a class's values are the distinct
// values any event of any of its cases carries) and the prosecutor
// re-identification risk (1 over the size of a case's class). It holds no
// storage and no HTTP: cases come in, a Report comes out, with memory
// bounded by spilling class counts to disk.
package disclosure
