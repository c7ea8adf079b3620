namespace Bitbudget.Service.Store;

/// <summary>Resource ids: a short type prefix and a time-ordered random part.</summary>
internal static class Ids
{
    public static string New(string prefix) => $"{prefix}_{Guid.CreateVersion7():N}";
}
