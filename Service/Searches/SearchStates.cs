namespace Bitbudget.Service.Searches;

/// <summary>The life of a search: queued, running, then one of the three final states.</summary>
internal static class SearchStates
{
    public const string Queued = "queued";
    public const string Running = "running";
    public const string Succeeded = "succeeded";
    public const string Failed = "failed";
    public const string Canceled = "canceled";

    public static IReadOnlyList<string> All { get; } = [Queued, Running, Succeeded, Failed, Canceled];

    public static bool IsFinal(string state) => state is Succeeded or Failed or Canceled;
}
