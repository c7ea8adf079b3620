namespace Bitbudget.Service.Demo;

/// <summary>The four hive states the invented monitor tells apart; the values are the class indices in the labels.</summary>
internal enum HiveState
{
    Calm = 0,
    SwarmPreparing = 1,
    Queenless = 2,
    Intruder = 3,
}
