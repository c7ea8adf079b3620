namespace Bitbudget.Service.Api;

/// <summary>Units (trials) done and planned in the current stage.</summary>
internal sealed record ProgressResponse(int Done, int Total);
