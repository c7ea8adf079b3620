using Bitbudget.Search.Planning;

namespace Bitbudget.Service.Api;

/// <summary>One page of a search's trials: every trial its result rests on, as many as the manifest's <c>trials</c>.</summary>
/// <param name="Total">Trials in all, measured and reused; equals the manifest's <c>trials</c> once the search is done.</param>
/// <param name="Measured">Trials this search measured itself (its sweep's and validations' cost).</param>
/// <param name="Reused">
/// Sensitivity trials taken from earlier searches on the same model, dataset and settings instead of measured again;
/// each says which search measured it in <c>reusedFrom</c>.
/// </param>
internal sealed record TrialPageResponse(long Total, long Measured, long Reused, int Offset, int Limit, IReadOnlyList<TrialRecord> Items);
