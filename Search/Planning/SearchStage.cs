namespace Bitbudget.Search.Planning;

/// <summary>The stages a search goes through, in order.</summary>
public enum SearchStage
{
    Reference,
    Sweep,
    Search,
    Validate,
    Export,
}
