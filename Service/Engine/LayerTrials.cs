namespace Bitbudget.Service.Engine;

/// <summary>One layer of a sweep's plan and how many sensitivity trials it takes.</summary>
internal sealed record LayerTrials(string Layer, int Trials);
